"""Matrix files and safe output.

Formats (see the outside contract and docs/formats.md): ``tsv``, ``csv``,
``square``, ``lower``, ``nexus`` (a NEXUS DISTANCES block) and ``npz``
(binary), one :class:`MatrixFormat` entry each in :data:`REGISTRY` (its
extensions, reader, writer, how it is recognised and a description). A new
format is its reader and writer here plus one entry.

The format is taken from an explicit option, else the extension (``.tsv``,
``.csv``, ``.nex``/``.nexus``, ``.npz``; looking through a final ``.gz`` or
``.bz2``), else from the content (an npz archive by its first bytes, a NEXUS
file with a DISTANCES block, ``square`` or ``lower`` when the first line is
a lone integer), else tsv.

Every reader takes gzip or bz2 input, recognised by its first bytes (not its
name), standard input too; :data:`MAX_DECOMPRESSED` caps the expansion.

Every file is written atomically: to a temporary file in the target folder,
then renamed, so a failed command never leaves a partial file and never
touches an existing one. A path ending in ``.gz`` or ``.bz2`` is written
compressed. ``-`` means standard input or output.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import os
import re
import sys
import tempfile
from dataclasses import dataclass, field
from typing import Any, Callable, Iterator

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix, bad_label_char

__all__ = ["MatrixFormat", "REGISTRY", "MATRIX_FORMATS", "DEFAULT_FORMAT", "format_table", "read_text",
           "read_bytes", "strip_compression_suffix", "COMPRESSED_SUFFIXES", "MAX_DECOMPRESSED", "NAME_WIDTH",
           "matrix_format", "read_matrix", "read_pairs", "format_matrix", "quote_cell", "OutputSet",
           "check_distinct_outputs", "to_jsonable", "write_matrix", "write_text", "iter_nonblank"]

_NA = {"", "na", "nan"}


# ----------------------------------------------------------------- reading
# Compressed input is recognised by its first bytes (never by its name): gzip files begin
# with 1f 8b (RFC 1952), bzip2 files with "BZh" and the block size digit.
_BZ2_BLOCKS = (b"\x31\x41\x59\x26\x53\x59", b"\x17\x72\x45\x38\x50\x90")  # a block, or the end


def _compression(head: bytes) -> str | None:
    """``gzip``, ``bz2`` or None from a file's first 10 bytes.

    bzip2 is taken only with its block size digit and the magic of its first
    block after "BZh", so a text that happens to begin with "BZh" stays text.
    """
    if head.startswith(b"\x1f\x8b"):
        return "gzip"
    if head[:3] == b"BZh" and head[3:4] in b"123456789" and len(head) >= 10 and head[4:10] in _BZ2_BLOCKS:
        return "bz2"
    return None
#: Names that say "compressed": looked through when a format is guessed from an extension.
COMPRESSED_SUFFIXES = (".gz", ".bz2")
#: The most bytes one compressed input may expand to (4 GiB; a text matrix of about 14,000
#: taxa). A larger expansion is refused with an error rather than exhausting memory (a
#: "decompression bomb"). The environment variable SEQDIST_MAX_DECOMPRESSED (bytes, or with a
#: K, M or G suffix) overrides it; so does setting this attribute from Python.
MAX_DECOMPRESSED = 4 << 30
_CHUNK = 1 << 20


def _decompression_limit() -> int:
    raw = os.environ.get("SEQDIST_MAX_DECOMPRESSED", "").strip()
    if not raw:
        return int(MAX_DECOMPRESSED)
    scale = {"K": 1 << 10, "M": 1 << 20, "G": 1 << 30}.get(raw[-1:].upper(), 1)
    digits = raw[:-1] if scale != 1 else raw
    if not digits.isdigit() or int(digits) < 1:
        raise InputError(f"SEQDIST_MAX_DECOMPRESSED must be a positive number of bytes (e.g. 8G), got {raw!r}")
    return int(digits) * scale


def _decompress(fh, kind: str, name: str) -> bytes:
    """Read a gzip or bz2 stream in chunks, refusing to expand beyond the limit, with one-line errors."""
    import bz2
    import gzip
    import zlib

    limit = _decompression_limit()
    opened = gzip.GzipFile(fileobj=fh, mode="rb") if kind == "gzip" else bz2.BZ2File(fh, mode="rb")
    chunks, total = [], 0
    try:
        with opened:
            while True:
                chunk = opened.read(_CHUNK)
                if not chunk:
                    break
                total += len(chunk)
                if total > limit:
                    raise InputError(f"{name}: the {kind} data expands to more than {_size(limit)}, the limit for "
                                     "a compressed input (a damaged or hostile file?); decompress it yourself, "
                                     "or raise SEQDIST_MAX_DECOMPRESSED")
                chunks.append(chunk)
    except (OSError, EOFError, zlib.error, ValueError) as exc:  # bad magic, CRC, truncation...
        why = " ".join(str(exc).split()) or type(exc).__name__
        if isinstance(exc, EOFError):
            why = "the file ends before the compressed stream does (truncated?)"
        raise InputError(f"{name}: corrupt {kind} data ({why})") from None
    return b"".join(chunks)


def _size(nbytes: int) -> str:
    for unit, scale in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if nbytes >= scale:
            return f"{nbytes / scale:g} {unit}"
    return f"{nbytes} bytes"


def read_bytes(path: str, what: str = "file") -> bytes:
    """Whole content of a file (or standard input for ``-``), decompressed when it is gzip or bz2.

    Compression is recognised by the first bytes, never by the name, and the
    expansion is capped at :data:`MAX_DECOMPRESSED` bytes.

    Raises
    ------
    InputError
        Missing, unreadable or corrupt file, or one expanding beyond the limit.

    Examples
    --------
    >>> import gzip, tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "x")
    >>> from pathlib import Path
    >>> _ = Path(p).write_bytes(gzip.compress(b"hello", mtime=0))
    >>> read_bytes(p)
    b'hello'
    """
    name = "<stdin>" if path == "-" else path
    if path == "-":
        fh = io.BytesIO(sys.stdin.buffer.read())
    else:
        try:
            fh = open(path, "rb")
        except FileNotFoundError:
            raise InputError(f"{path}: no such {what}") from None
        except IsADirectoryError:
            raise InputError(f"{path}: is a directory, not a {what}") from None
        except PermissionError:
            raise InputError(f"{path}: permission denied") from None
        except OSError as exc:
            raise InputError(f"{path}: cannot read ({exc.strerror})") from None
    try:
        with fh:
            head = fh.read(10)
            kind = _compression(head)
            if fh.seekable():
                fh.seek(0)
            else:  # a pipe (e.g. a shell's <(...)): put the first bytes back in front
                fh = io.BytesIO(head + fh.read())
            return _decompress(fh, kind, name) if kind else fh.read()
    except OSError as exc:
        raise InputError(f"{name}: cannot read ({exc.strerror or exc})") from None


def read_text(path: str, what: str = "file") -> str:
    """Whole text of a file (or standard input for ``-``), with clear errors.

    gzip and bz2 input is decompressed first (see :func:`read_bytes`).

    Examples
    --------
    >>> import bz2, tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "x.txt")
    >>> from pathlib import Path
    >>> _ = Path(p).write_bytes(bz2.compress(b"a\\tb\\n"))
    >>> read_text(p)
    'a\\tb\\n'
    """
    return _decode(read_bytes(path, what), "<stdin>" if path == "-" else path, what)


def _decode(data: bytes, name: str, what: str) -> str:
    if b"\x00" in data[:65536]:
        hint = ""
        if what == "matrix file" and REGISTRY["npz"].recognise(data):
            hint = " (an npz archive? give --in-format npz or name it .npz)"
        raise InputError(f"{name}: binary data, not a text {what}{hint}")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(f"{name}: line {line}: not UTF-8 text") from None
    return text


def strip_compression_suffix(path: str) -> str:
    """The path without a trailing ``.gz`` or ``.bz2``, so that ``aln.fasta.gz`` is guessed as FASTA.

    Examples
    --------
    >>> strip_compression_suffix("m.tsv.GZ"), strip_compression_suffix("m.tsv")
    ('m.tsv', 'm.tsv')
    """
    low = path.lower()
    for suffix in COMPRESSED_SUFFIXES:
        if low.endswith(suffix):
            return path[: -len(suffix)]
    return path


# Output paths whose matrix format was guessed (no explicit format, no known
# extension): OutputSet.commit says so, in one line, once the file is written.
_GUESSED: set = set()


def _format_for(path: str, explicit: str | None = None) -> str:
    if explicit:
        _check_format(explicit)
        return explicit
    return _by_extension(path) or DEFAULT_FORMAT


def _check_format(fmt) -> None:
    if not (isinstance(fmt, str) and fmt in REGISTRY):
        raise InputError(f"unknown matrix format '{fmt}' (choose from {', '.join(REGISTRY)})")


def _by_extension(path: str) -> str | None:
    """The format whose extensions hold the path's extension (looking through ``.gz``/``.bz2``), else None."""
    ext = os.path.splitext(strip_compression_suffix(path))[1].lower()
    for f in REGISTRY.values():
        if ext in f.extensions:
            return f.name
    return None


def matrix_format(path: str, explicit: str | None = None) -> str:
    """The format to write a matrix to ``path`` in: the explicit choice, else by extension, else tsv.

    When it has to guess (no explicit choice and no known extension), the
    path is remembered, and :meth:`OutputSet.commit` says in one line on
    standard error which format it wrote there, once it has written it.

    Examples
    --------
    >>> matrix_format("d.csv"), matrix_format("d.txt", "square"), matrix_format("d.txt")
    ('csv', 'square', 'tsv')
    """
    fmt = _format_for(path, explicit)
    if not explicit and path != "-" and _by_extension(path) is None:
        _GUESSED.add(os.path.abspath(path))
    return fmt


def _square_shape(text: str) -> str | None:
    """``square`` or ``lower`` when the first line is a lone count (by the next row's length), else None."""
    first = text.lstrip("\n").split("\n", 1)[0]
    if not first.strip().isdigit() or "\t" in first:  # a tsv header with one numeric label is not a count
        return None
    lines = [ln for ln in text.lstrip("\n").split("\n")[1:] if ln.strip()]
    if not lines:
        return "square"
    row, toks = lines[0].rstrip("\r"), lines[0].split()
    if len(toks) == 1:
        return "lower"  # the first row holds a name and no distance
    if all(_is_number(t) for t in toks[1:]):
        return "square"
    # a name with spaces in a fixed-width field: lower when nothing follows the field
    return "square" if row[NAME_WIDTH:].strip() else "lower"


def _recognise(text: str) -> str | None:
    """The first text format whose ``recognise`` accepts the text, else None."""
    for f in REGISTRY.values():
        if not f.binary and f.recognise is not None and f.recognise(text):
            return f.name
    return None


def read_matrix(path: str, fmt: str | None = None) -> DistanceMatrix:
    """Read and validate a distance matrix file.

    Parameters
    ----------
    path : str
        File path, or ``-`` for standard input; gzip or bz2 content is
        decompressed first (recognised by its first bytes).
    fmt : str, optional
        One of :data:`MATRIX_FORMATS` (``tsv``, ``csv``, ``square``,
        ``lower``, ``nexus``, ``npz``); by default from the extension
        (through ``.gz``/``.bz2``), else from the content, else tsv (see the
        module docs).

    Returns
    -------
    DistanceMatrix

    Raises
    ------
    InputError
        With the file, line and label or pair of the first problem.

    Examples
    --------
    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "d.tsv")
    >>> from pathlib import Path
    >>> _ = Path(p).write_text("\\ta\\tb\\na\\t0\\t1.5\\nb\\t1.5\\t0\\n")
    >>> read_matrix(p)["a", "b"]
    1.5
    """
    if fmt is not None:
        _check_format(fmt)
    if fmt in (None, "npz") and path != "-" and _by_extension(path) in (None, "npz") and _starts_zip(path):
        # A plain npz file is read from the file itself: holding its bytes first would double the
        # memory of a large matrix (3.2 GB at 20,000 taxa)
        return _read_npz(path, path)
    data = read_bytes(path, "matrix file")
    name = "<stdin>" if path == "-" else path
    if fmt is None:
        fmt = _by_extension(path)
    if fmt is None:  # binary formats are recognised from their first bytes, before any decoding
        fmt = next((f.name for f in REGISTRY.values() if f.binary and f.recognise and f.recognise(data)), None)
    if fmt is not None and REGISTRY[fmt].binary:
        if not data:
            raise InputError(f"{name}: empty file")
        return REGISTRY[fmt].reader(data, name)
    text = _decode(data, name, "matrix file")
    del data
    if not text.strip():
        raise InputError(f"{name}: empty file")
    if fmt is None:
        fmt = _recognise(text) or DEFAULT_FORMAT
    return REGISTRY[fmt].reader(text, name)


def _check_label(label: str, name: str, line: int) -> None:
    """Refuse a label holding a control character (a line break, escape...), naming the line.

    Such a label (possible in a quoted csv cell) would break every line-based
    output and message that shows it.
    """
    bad = bad_label_char(label)
    if bad is not None:
        from seqdist.core.console import one_line

        raise InputError(f"{name}: line {line}: label '{one_line(label)}' holds a control character "
                         f"({one_line(bad)!s}); labels must be printable text")


def _parse_cell(cell: str, name: str, line: int, row_label: str, col_label: str) -> float:
    c = cell.strip()
    if c.lower() in _NA:
        return np.nan
    try:
        return float(c)
    except ValueError:
        raise InputError(f"{name}: line {line}: non-numeric value '{c}' in row '{row_label}', "
                         f"column '{col_label}'") from None


#: Below this many characters a delimited file is read without pandas: importing it
#: costs more (about 0.4 s) than parsing a small file in Python.
_PANDAS_FROM = 200_000


def _read_delimited(text: str, name: str, sep: str) -> DistanceMatrix:
    if len(text) >= _PANDAS_FROM:
        fast = _read_delimited_fast(text, name, sep)
        if fast is not None:
            return fast
    return _read_delimited_careful(text, name, sep)


def _read_delimited_fast(text: str, name: str, sep: str) -> DistanceMatrix | None:
    """pandas' C parser for well-formed files; None sends odd files to the careful reader."""
    import pandas as pd

    try:
        head, _, body = text.partition("\n")
        header = next(csv.reader([head], delimiter=sep))
        labels = [h.strip() for h in header[1:]]
        if not labels or not body.strip() or '"' in body or '"' in head:
            return None
        # pandas pads short rows with NaN; a ragged row must be an error, so check the shape first.
        n = len(labels)
        if any(line.count(sep) != n for line in body.split("\n") if line.strip()):
            return None
        frame = pd.read_csv(io.StringIO(body), sep=sep, header=None, index_col=0, dtype={0: str},
                            keep_default_na=False, na_values=["", "NA", "nan", "NaN", "na"],
                            skip_blank_lines=True, engine="c")
    except Exception:  # any oddity: the careful reader names it precisely
        return None
    from pandas.api.types import is_bool_dtype, is_numeric_dtype

    if frame.shape != (len(labels), len(labels)) or not all(is_numeric_dtype(t) and not is_bool_dtype(t)
                                                              for t in frame.dtypes):
        return None
    rows = [str(r).strip() for r in frame.index]
    if any(bad_label_char(lab) is not None for lab in labels + rows):
        return None  # the careful reader names the line
    values = frame.to_numpy(dtype=np.float64)
    if rows != labels:
        if sorted(rows) != sorted(labels) or len(set(rows)) != len(rows):
            return None
        pos = {lab: j for j, lab in enumerate(labels)}
        order = [pos[r] for r in rows]
        values = values[:, order]
        labels = rows
    return DistanceMatrix.from_array(values, rows, col_labels=labels, source=name)


def _read_delimited_careful(text: str, name: str, sep: str) -> DistanceMatrix:
    reader = csv.reader(io.StringIO(text), delimiter=sep)
    raw = []
    try:
        first = 1
        for row in reader:  # a quoted cell may span lines: keep the line each record starts on
            raw.append((first, row))
            first = reader.line_num + 1
    except csv.Error as exc:
        raise InputError(f"{name}: line {reader.line_num}: {exc}") from None
    rows = [(ln, r) for ln, r in raw if any(c.strip() for c in r)]
    if not rows:
        raise InputError(f"{name}: empty file")
    head_line, header = rows[0]
    labels = [h.strip() for h in header[1:]]
    for lab in labels:
        _check_label(lab, name, head_line)
    for ln, r in rows[1:]:
        _check_label(r[0].strip(), name, ln)
    if not labels:
        raise InputError(f"{name}: line {head_line}: the header holds no labels "
                         f"(is this a {'tab' if sep == chr(9) else 'comma'}-separated matrix?)")
    body = rows[1:]
    n = len(labels)
    if len(body) != n:
        raise InputError(f"{name}: {n} column labels but {len(body)} data rows")
    values = np.empty((n, n))
    row_labels = []
    for i, (ln, r) in enumerate(body):
        if len(r) != n + 1:
            raise InputError(f"{name}: line {ln}: ragged row '{r[0].strip()}': {len(r) - 1} values, "
                             f"expected {n}")
        row_labels.append(r[0].strip())
        for j in range(n):
            values[i, j] = _parse_cell(r[j + 1], name, ln, r[0].strip(), labels[j])
    if row_labels != labels and sorted(row_labels) == sorted(labels) and len(set(labels)) == n:
        pos = {lab: j for j, lab in enumerate(labels)}
        values = values[:, [pos[r] for r in row_labels]]
        labels = row_labels
    return DistanceMatrix.from_array(values, row_labels, col_labels=labels, source=name)


#: The width of the name field in square layouts written with names padded to a fixed width
#: (common practice): the name may hold spaces and run straight into the first number.
NAME_WIDTH = 10


def _read_square(text: str, name: str, lower: bool) -> DistanceMatrix:
    """Names separated by white space; failing that, names in a fixed field of :data:`NAME_WIDTH` characters.

    The white-space reading is tried first and its error is the one reported
    when the fixed-width reading fails too, so a plain file's mistakes are
    named as they always were.
    """
    try:
        return _read_square_tokens(text, name, lower)
    except InputError as first:
        try:
            dm = _read_square_fixed(text, name, lower)
        except InputError:
            dm = None
        if dm is None:
            raise first from None
        return dm


def _read_square_fixed(text: str, name: str, lower: bool) -> DistanceMatrix | None:
    """Rows whose first :data:`NAME_WIDTH` characters are the name; None when the file is not laid out so."""
    lines = [(ln, line.rstrip("\r")) for ln, line in enumerate(text.split("\n"), start=1) if line.strip()]
    if not lines or not lines[0][1].strip().isdigit():
        return None
    n = int(lines[0][1].strip())
    if n < 1 or n > len(lines) - 1:
        return None
    labels, rows = [], []
    k = 1
    for i in range(n):
        want = i if lower else n
        if k >= len(lines):
            return None
        ln, line = lines[k]
        k += 1
        label = line[:NAME_WIDTH].strip()
        if not label or line[:NAME_WIDTH].startswith((" ", "\t")):
            return None
        _check_label(label, name, ln)
        toks = [(t, ln) for t in line[NAME_WIDTH:].split()]
        while len(toks) < want and k < len(lines) and all(_is_number(t) for t in lines[k][1].split()):
            toks.extend((t, lines[k][0]) for t in lines[k][1].split())  # a row wrapped over lines
            k += 1
        if len(toks) != want:
            return None
        labels.append(label)
        rows.append([_parse_cell(t, name, tl, label, f"position {j + 1}") for j, (t, tl) in enumerate(toks)])
    if k != len(lines):
        return None
    return _square_matrix(rows, labels, name, lower)


def _square_matrix(rows: list, labels: list, name: str, lower: bool) -> DistanceMatrix:
    # the rows read (full, or the entries below the diagonal) as the checked matrix
    n = len(labels)
    values = np.full((n, n), np.nan)
    for i, row in enumerate(rows):
        values[i, :len(row)] = row
    if lower:
        iu = np.triu_indices(n, 1)
        values[iu] = values.T[iu]
        np.fill_diagonal(values, 0.0)
    return DistanceMatrix.from_array(values, labels, source=name, copy=False)


def _read_square_tokens(text: str, name: str, lower: bool) -> DistanceMatrix:
    # Tokens with their line numbers; a row may wrap over several lines.
    toks: list[tuple[str, int]] = []
    for ln, line in enumerate(text.split("\n"), start=1):
        toks.extend((t, ln) for t in line.split())
    if not toks:
        raise InputError(f"{name}: empty file")
    first, ln0 = toks[0]
    try:
        n = int(first)
    except ValueError:
        raise InputError(f"{name}: line {ln0}: expected the number of taxa, found '{first}'") from None
    if n < 1:
        raise InputError(f"{name}: line {ln0}: number of taxa must be positive")
    # Each row starts on a line of its own: a count above the lines present is
    # refused at once, and rows are gathered before the n x n array is made,
    # so a wrong count never asks for more memory than the file holds.
    lines = len({tl for _, tl in toks[1:]})
    if n > lines:
        raise InputError(f"{name}: line {ln0}: {n} taxa announced but only {lines} "
                         f"line{'s' if lines != 1 else ''} follow{'s' if lines == 1 else ''}")
    rows: list[list[float]] = []
    labels = []
    pos = 1
    for i in range(n):
        if pos >= len(toks):
            raise InputError(f"{name}: {n} taxa announced but only {i} rows found")
        label, ln = toks[pos]
        pos += 1
        _check_label(label, name, ln)
        labels.append(label)
        want = i if lower else n
        got = toks[pos:pos + want]
        if len(got) < want:
            raise InputError(f"{name}: line {ln}: row '{label}' has {len(got)} values, expected {want}")
        row = []
        for j, (tok, tl) in enumerate(got):
            if tl != ln and not _is_number(tok):
                raise InputError(f"{name}: line {ln}: row '{label}' has {j} values, expected {want}")
            row.append(_parse_cell(tok, name, tl, label, f"position {j + 1}"))
        rows.append(row)
        pos += want
    if pos != len(toks):
        tok, tl = toks[pos]
        raise InputError(f"{name}: line {tl}: unexpected '{tok}' after {n} rows (ragged rows?)")
    return _square_matrix(rows, labels, name, lower)


def _is_number(tok: str) -> bool:
    if tok.lower() in _NA:
        return True
    try:
        float(tok)
        return True
    except ValueError:
        return False


def read_pairs(path: str, dm: DistanceMatrix, what: str = "pair file") -> np.ndarray:
    """Read ``label<TAB>label`` lines into an (m, 2) array of indices into ``dm``.

    Blank lines and lines starting with ``#`` are skipped. Each failure names
    the line.
    """
    text = read_text(path, what)
    name = "<stdin>" if path == "-" else path
    idx = dm._index_map()
    out = []
    for ln, line in enumerate(text.split("\n"), start=1):
        s = line.rstrip("\r")
        if not s.strip() or s.lstrip().startswith("#"):
            continue
        parts = s.split("\t")
        if len(parts) != 2:
            raise InputError(f"{name}: line {ln}: expected 'label<TAB>label', found {s!r}")
        a, b = parts[0].strip(), parts[1].strip()
        for lab in (a, b):
            if lab not in idx:
                raise InputError(f"{name}: line {ln}: unknown label '{lab}'")
        if a == b:
            raise InputError(f"{name}: line {ln}: a pair needs two different labels ('{a}')")
        out.append((idx[a], idx[b]))
    return np.array(out, dtype=np.intp).reshape(-1, 2)


# ----------------------------------------------------------------- NEXUS DISTANCES
# The block as the NEXUS standard defines it: Maddison, Swofford & Maddison 1997, "NEXUS: an
# extensible file format for systematic information", Syst. Biol. 46:590-621 (the DISTANCES
# block: DIMENSIONS [NEWTAXA] NTAX= [NCHAR=]; FORMAT TRIANGLE=LOWER|UPPER|BOTH [NO]DIAGONAL
# [NO]LABELS MISSING= INTERLEAVE; TAXLABELS; MATRIX). Defaults: TRIANGLE=LOWER, DIAGONAL,
# LABELS, MISSING=?.
_NEXUS_TOKEN = re.compile(r"""
    (?P<ws>\s+)
  | (?P<quoted>'(?:[^']|'')*')
  | (?P<open>\[)
  | (?P<punct>[;=])
  | (?P<word>[^\s;=\['\]]+)
  | (?P<bad>['\]])
""", re.VERBOSE)


class _NexusText:
    """Tokens of a NEXUS text (comments dropped, quotes undone) with their offsets, for line numbers."""

    def __init__(self, text: str, name: str):
        self.text, self.name = text, name
        self.toks: list[str] = []
        self.starts: list[int] = []
        self.quoted: list[bool] = []
        self._nl = None
        pos, end = 0, len(text)
        match = _NEXUS_TOKEN.match
        while pos < end:
            m = match(text, pos)
            kind = m.lastgroup
            if kind == "open":  # a comment; comments nest
                depth, j = 0, pos
                while j < end:
                    c = text[j]
                    depth += (c == "[") - (c == "]")
                    j += 1
                    if depth == 0:
                        break
                if depth:
                    raise InputError(f"{name}: line {self.line(pos)}: a comment opened with '[' is never closed "
                                     "(truncated?)")
                pos = j
                continue
            if kind == "bad":
                what = "a quote that is never closed" if m.group() == "'" else "a ']' with no '[' before it"
                raise InputError(f"{name}: line {self.line(pos)}: {what} (truncated?)")
            if kind != "ws":
                tok = m.group()
                q = kind == "quoted"
                self.toks.append(tok[1:-1].replace("''", "'") if q else tok)
                self.starts.append(pos)
                self.quoted.append(q)
            pos = m.end()

    def line(self, offset: int) -> int:
        if self._nl is None:
            self._nl = np.flatnonzero(np.frombuffer(self.text.encode("utf-32-le"), dtype=np.uint32) == 10)
        return int(np.searchsorted(self._nl, offset)) + 1

    def at(self, k: int) -> int:
        """Line of token k (the end of the text when k is past the last token)."""
        return self.line(self.starts[k] if k < len(self.toks) else len(self.text.rstrip()))

    def first_on_line(self, k: int) -> bool:
        return k == 0 or "\n" in self.text[self.starts[k - 1]:self.starts[k]]


def _nexus_commands(nx: _NexusText):
    """{block name: [(begin token, [(command token, end token), ...]), ...]} of a NEXUS text.

    A command runs from its first token to the token before its ';'.
    """
    toks, name = nx.toks, nx.name
    if not toks or toks[0].upper() != "#NEXUS":
        raise InputError(f"{name}: line 1: a NEXUS file begins with '#NEXUS'")
    blocks: dict = {}
    k = 1
    while k < len(toks):
        if toks[k].upper() != "BEGIN" or nx.quoted[k]:
            raise InputError(f"{name}: line {nx.at(k)}: expected 'BEGIN' (a block), found '{toks[k]}'")
        if k + 2 >= len(toks) or toks[k + 2] != ";":
            raise InputError(f"{name}: line {nx.at(k)}: 'BEGIN' needs a block name and ';' (truncated?)")
        block, begin = toks[k + 1].upper(), k
        commands = []
        k += 3
        while True:
            if k >= len(toks):
                raise InputError(f"{name}: line {nx.at(k)}: the {block} block (line {nx.at(begin)}) has no 'END;' "
                                 "(truncated?)")
            first = k
            while k < len(toks) and toks[k] != ";":
                k += 1
            if k >= len(toks):
                raise InputError(f"{name}: line {nx.at(k)}: the {toks[first].upper()} command of the {block} block "
                                 f"(line {nx.at(first)}) never ends with ';' (truncated?)")
            k += 1
            if toks[first].upper() in ("END", "ENDBLOCK") and first + 1 == k - 1:
                break
            commands.append((first, k - 1))
        blocks.setdefault(block, []).append((begin, commands))
    return blocks


def _nexus_options(nx: _NexusText, a: int, b: int) -> list:
    """(key, value or None, token index) for the tokens a..b-1 of a command (``KEY=VALUE`` or ``KEY``)."""
    out, k = [], a
    while k < b:
        key = nx.toks[k].upper()
        if k + 1 < b and nx.toks[k + 1] == "=":
            if k + 2 >= b:
                raise InputError(f"{nx.name}: line {nx.at(k)}: '{nx.toks[k]}=' has no value")
            out.append((key, nx.toks[k + 2], k))
            k += 3
        else:
            out.append((key, None, k))
            k += 1
    return out


def _read_nexus(text: str, name: str) -> DistanceMatrix:
    nx = _NexusText(text, name)
    blocks = _nexus_commands(nx)
    toks = nx.toks
    dist = blocks.get("DISTANCES", [])
    if not dist:
        held = ", ".join(blocks) or "no block"
        raise InputError(f"{name}: no DISTANCES block in this NEXUS file (it holds {held})")
    if len(dist) > 1:
        raise InputError(f"{name}: line {nx.at(dist[1][0])}: a second DISTANCES block; give one matrix per file")
    taxa, taxa_line = None, None
    for _begin, commands in blocks.get("TAXA", [])[:1]:
        ntax = None
        for a, b in commands:
            cmd = toks[a].upper()
            if cmd == "DIMENSIONS":
                ntax = _nexus_ntax(nx, a, b)
            elif cmd == "TAXLABELS":
                taxa, taxa_line = _nexus_labels(nx, a + 1, b), nx.at(a)
        if taxa is None:
            raise InputError(f"{name}: line {nx.at(_begin)}: the TAXA block has no TAXLABELS")
        if ntax is not None and ntax[0] != len(taxa):
            raise InputError(f"{name}: line {ntax[1]}: the TAXA block gives NTAX={ntax[0]} but TAXLABELS "
                             f"(line {taxa_line}) lists {len(taxa)} taxa")
    begin, commands = dist[0]
    triangle, diagonal, labelled, missing, interleave = "LOWER", True, True, "?", False
    ntax, matrix, newtaxa = None, None, False
    for a, b in commands:
        cmd = toks[a].upper()
        if cmd == "DIMENSIONS":
            newtaxa = any(key == "NEWTAXA" for key, _, _ in _nexus_options(nx, a + 1, b))
            ntax = _nexus_ntax(nx, a, b)
        elif cmd == "FORMAT":
            for key, value, k in _nexus_options(nx, a + 1, b):
                if key == "TRIANGLE" and value is not None and value.upper() in ("LOWER", "UPPER", "BOTH"):
                    triangle = value.upper()
                elif key in ("DIAGONAL", "NODIAGONAL") and value is None:
                    diagonal = key == "DIAGONAL"
                elif key in ("LABELS", "NOLABELS") and value is None:
                    labelled = key == "LABELS"
                elif key == "MISSING" and value is not None:
                    missing = value
                elif key in ("INTERLEAVE", "NOINTERLEAVE") and value is None:
                    interleave = key == "INTERLEAVE"
                elif key == "INTERLEAVE" and value is not None and value.upper() in ("YES", "NO"):
                    interleave = value.upper() == "YES"
                else:
                    shown = toks[k] + (f"={value}" if value is not None else "")
                    raise InputError(f"{name}: line {nx.at(k)}: unknown FORMAT option '{shown}' in the DISTANCES "
                                     "block (TRIANGLE=LOWER|UPPER|BOTH, [NO]DIAGONAL, [NO]LABELS, MISSING=, "
                                     "INTERLEAVE)")
        elif cmd == "TAXLABELS":
            taxa, taxa_line = _nexus_labels(nx, a + 1, b), nx.at(a)
        elif cmd == "MATRIX":
            matrix = (a + 1, b)
        # other commands (TITLE, LINK, ...) do not change the numbers
    if matrix is None:
        raise InputError(f"{name}: line {nx.at(begin)}: the DISTANCES block has no MATRIX")
    if ntax is not None and taxa is not None and ntax[0] != len(taxa):
        where = "its TAXLABELS" if newtaxa and taxa_line else "the TAXA block"
        raise InputError(f"{name}: line {ntax[1]}: the DISTANCES block gives NTAX={ntax[0]} but {where} "
                         f"(line {taxa_line}) lists {len(taxa)} taxa")
    n = len(taxa) if taxa is not None else (ntax[0] if ntax is not None else None)
    if taxa is None and not labelled:
        raise InputError(f"{name}: line {nx.at(begin)}: a DISTANCES matrix with NOLABELS needs its taxa from a "
                         "TAXA block or TAXLABELS")
    if n is None and triangle != "LOWER":
        raise InputError(f"{name}: line {nx.at(begin)}: TRIANGLE={triangle} needs the number of taxa "
                         "(DIMENSIONS NEWTAXA NTAX=, or a TAXA block)")
    if interleave and not labelled:
        raise InputError(f"{name}: line {nx.at(begin)}: an INTERLEAVE matrix needs LABELS")
    rows = _nexus_rows(nx, matrix, taxa, n, triangle, diagonal, labelled, interleave)
    labels = list(rows)
    n = len(labels)
    values = np.full((n, n), np.nan)
    if not diagonal:
        np.fill_diagonal(values, 0.0)
    order = {lab: i for i, lab in enumerate(labels)}
    for lab, (cells, ln) in rows.items():
        i = order[lab]
        cols = _nexus_columns(i, n, triangle, diagonal)
        if len(cells) != len(cols):
            raise InputError(f"{name}: line {ln}: row '{lab}' holds {len(cells)} values, expected {len(cols)} "
                             f"(TRIANGLE={triangle}, {'DIAGONAL' if diagonal else 'NODIAGONAL'}, {n} taxa)")
        row = [_nexus_cell(nx, kk, missing, lab, labels[j]) for kk, j in zip(cells, cols)]
        values[i, cols] = row
        if triangle != "BOTH":
            values[cols, i] = row
    return DistanceMatrix.from_array(values, labels, source=name)


def _nexus_cell(nx: _NexusText, k: int, missing: str, row: str, col: str) -> float:
    cell = nx.toks[k]
    if cell == missing and not nx.quoted[k]:
        return np.nan
    try:
        return float(cell)
    except ValueError:  # NA and nan are read as missing too; anything else is named with its line
        return _parse_cell(cell, nx.name, nx.at(k), row, col)


def _nexus_columns(i: int, n: int, triangle: str, diagonal: bool) -> list:
    if triangle == "LOWER":
        return list(range(i + 1 if diagonal else i))
    if triangle == "UPPER":
        return list(range(i if diagonal else i + 1, n))
    return [j for j in range(n) if diagonal or j != i]


def _nexus_ntax(nx: _NexusText, a: int, b: int):
    for key, value, k in _nexus_options(nx, a + 1, b):
        if key == "NTAX":
            if value is None or not value.isdigit() or int(value) < 1:
                raise InputError(f"{nx.name}: line {nx.at(k)}: NTAX must be a positive whole number, got '{value}'")
            return int(value), nx.at(k)
    return None


def _nexus_labels(nx: _NexusText, a: int, b: int) -> list:
    labels, seen = [], {}
    for k in range(a, b):
        lab = nx.toks[k]
        _check_label(lab, nx.name, nx.at(k))
        if lab in seen:
            raise InputError(f"{nx.name}: line {nx.at(k)}: taxon '{lab}' is listed twice in TAXLABELS")
        seen[lab] = k
        labels.append(lab)
    return labels


def _nexus_rows(nx: _NexusText, span, taxa, n, triangle, diagonal, labelled, interleave) -> dict:
    """{label: ([token index of each cell], line of its first row)} in taxon order."""
    toks, name = nx.toks, nx.name
    a, b = span
    known = {lab: i for i, lab in enumerate(taxa)} if taxa is not None else None
    rows: dict = {}

    def start_row(k: int) -> str:
        lab = toks[k]
        if known is not None and lab not in known:
            raise InputError(f"{name}: line {nx.at(k)}: unknown label '{lab}' in the DISTANCES matrix "
                             "(not one of the taxa listed in TAXLABELS)")
        if known is None:
            _check_label(lab, name, nx.at(k))
            if n is not None and len(rows) >= n and lab not in rows:
                raise InputError(f"{name}: line {nx.at(k)}: row '{lab}' is one more than the NTAX={n} taxa")
        if lab not in rows:
            rows[lab] = ([], nx.at(k))
        return lab

    if interleave:  # each line: a label, then more of that taxon's row
        lab = None
        for k in range(a, b):
            if k == a or nx.first_on_line(k):
                lab = start_row(k)
            else:
                rows[lab][0].append(k)
    else:
        k = a
        i = 0
        # labelled rows run while tokens last; unlabelled rows are the taxa in order (the last may be empty)
        while (k < b) if labelled else (i < len(taxa)):
            if labelled:
                lab = toks[k]
                if lab in rows:
                    raise InputError(f"{name}: line {nx.at(k)}: row '{lab}' appears twice in the DISTANCES matrix "
                                     "(give FORMAT INTERLEAVE for a matrix in blocks)")
                lab = start_row(k)
                k += 1
            else:
                lab = taxa[i]
                rows[lab] = ([], nx.at(k))
            idx = known[lab] if known is not None else len(rows) - 1
            want = len(_nexus_columns(idx, n if n is not None else idx + 1, triangle, diagonal))
            got = range(k, min(k + want, b))
            rows[lab][0].extend(got)
            k += len(got)
            i += 1
    if not interleave and not labelled and k < b:
        raise InputError(f"{name}: line {nx.at(k)}: more values than the {len(taxa)} rows hold")
    if known is not None:
        absent = [lab for lab in taxa if lab not in rows]
        if absent:
            more = f" and {len(absent) - 1} more" if len(absent) > 1 else ""
            raise InputError(f"{name}: line {nx.at(b)}: the DISTANCES matrix has no row for '{absent[0]}'{more} "
                             "(truncated?)")
        return {lab: rows[lab] for lab in taxa}
    if n is not None and len(rows) != n:
        raise InputError(f"{name}: line {nx.at(b)}: the DISTANCES matrix has {len(rows)} rows, NTAX={n}")
    return rows


_NEXUS_BARE = re.compile(r"[A-Za-z0-9.|]+")


def _nexus_label(label: str) -> str:
    """A label as a NEXUS word: bare when safe, else in single quotes with inner quotes doubled.

    Quoted too: underscores (the standard reads a bare one as a blank) and
    labels that read as numbers (a bare number may name a taxon by position).
    """
    if _NEXUS_BARE.fullmatch(label) and not _is_number(label):
        return label
    return "'" + label.replace("'", "''") + "'"


def _write_nexus(dm: DistanceMatrix) -> str:
    """A TAXA block and a DISTANCES block (TRIANGLE=LOWER, DIAGONAL, LABELS, MISSING=?), values by ``repr``."""
    labels = [_nexus_label(lab) for lab in dm.labels]
    width = max(len(lab) for lab in labels)
    heads = ["        " + lab.ljust(width) for lab in labels]
    rows = _rows_text(dm.values, heads, " ", lower=True)
    # the lower triangle with its diagonal: row i holds columns 0..i, so append the diagonal cell
    diag = [_fmt(v) for v in np.diagonal(dm.values).tolist()]
    body = [r[:-1] + " " + d + "\n" for r, d in zip(rows, diag)]
    parts = ["#NEXUS\n\nBEGIN TAXA;\n", f"    DIMENSIONS NTAX={dm.n};\n", "    TAXLABELS\n"]
    parts += [f"        {lab}\n" for lab in labels]
    parts += ["    ;\nEND;\n\nBEGIN DISTANCES;\n", "    FORMAT TRIANGLE=LOWER DIAGONAL LABELS MISSING=?;\n",
              "    MATRIX\n"]
    parts += [h + r[len(h):].replace(" NA", " ?") for h, r in zip(heads, body)]
    parts += ["    ;\nEND;\n"]
    return "".join(parts)


def _is_nexus_distances(text: str) -> bool:
    return text.lstrip()[:6].upper() == "#NEXUS" and re.search(r"(?i)\bbegin\s+distances\s*;", text) is not None


# ----------------------------------------------------------------- npz
# numpy's .npz: a zip archive of .npy files (numpy's documented array format, NEP 1), here
# "values" (n x n, float64, or float32 for a single-precision matrix) and "labels" (a 1-d
# unicode array). A large stored (not deflated) "values" member of a file is memory-mapped
# copy-on-write instead of read: the pages come from the file as the kernels touch them.
#: Smallest "values" member that is memory-mapped rather than read (bytes).
MMAP_MIN_BYTES = 1 << 28
_NPZ_MAGIC = (b"PK\x03\x04", b"PK\x05\x06")


def _is_npz(data: bytes) -> bool:
    return data[:4] in _NPZ_MAGIC


def _npy_bytes(arr: np.ndarray) -> bytes:
    buf = io.BytesIO()
    np.lib.format.write_array(buf, arr, version=(1, 0) if arr.nbytes < 1 << 31 else None, allow_pickle=False)
    return buf.getvalue()


def _write_npz(dm: DistanceMatrix) -> bytes:
    """An .npz archive as numpy.savez writes it, but byte-identical on every run (a fixed date in the zip).

    Members are stored, not deflated: distances barely compress, and a
    stored member is read straight into the array.
    """
    import zipfile

    width = max(1, max(len(lab) for lab in dm.labels))
    kind = np.float32 if dm.values.dtype == np.float32 else np.float64  # a float32 matrix stays float32
    members = (("values.npy", np.ascontiguousarray(dm.values, dtype=kind)),
               ("labels.npy", np.array(dm.labels, dtype=f"<U{width}")))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        for member, arr in members:
            info = zipfile.ZipInfo(member, date_time=(1980, 1, 1, 0, 0, 0))
            info.external_attr = 0o644 << 16
            zf.writestr(info, _npy_bytes(arr))
    return out.getvalue()


def _starts_zip(path: str) -> bool:
    try:
        with open(path, "rb") as fh:
            return fh.read(4) == b"PK\x03\x04"
    except OSError:
        return False  # read_bytes gives the error in its words


def _read_npz(data: bytes | str, name: str) -> DistanceMatrix:
    import zipfile

    limit = _decompression_limit()
    try:
        zf = zipfile.ZipFile(io.BytesIO(data) if isinstance(data, bytes) else data)
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise InputError(f"{name}: not a readable npz archive ({' '.join(str(exc).split())})") from None
    with zf:
        held = {i.filename: i for i in zf.infolist()}
        arrays = {}
        for key in ("values", "labels"):
            info = held.get(key + ".npy")
            if info is None:
                have = ", ".join(sorted(m[:-4] if m.endswith(".npy") else m for m in held)) or "nothing"
                raise InputError(f"{name}: the npz archive holds no '{key}' array (it holds: {have}); "
                                 "seqdist reads 'values' (n x n) and 'labels' (n names)")
            if info.file_size > limit:
                raise InputError(f"{name}: the '{key}' array would take {_size(info.file_size)}, more than the "
                                 f"{_size(limit)} limit (raise SEQDIST_MAX_DECOMPRESSED)")
            try:
                mapped = _map_member(data, info) if key == "values" else None
                if mapped is not None:
                    arrays[key] = mapped
                    continue
                with zf.open(info) as fh:
                    arrays[key] = np.lib.format.read_array(fh, allow_pickle=False)
            except ValueError as exc:
                if "allow_pickle" in str(exc) or "Object arrays" in str(exc):
                    raise InputError(f"{name}: the '{key}' array holds Python objects, which seqdist never "
                                     "unpickles; store numbers (values) and unicode strings (labels)") from None
                raise InputError(f"{name}: the '{key}' array is not readable ({' '.join(str(exc).split())})") \
                    from None
            except (zipfile.BadZipFile, OSError, EOFError) as exc:
                raise InputError(f"{name}: corrupt npz archive ({' '.join(str(exc).split()) or 'truncated'})") \
                    from None
    values, labels = arrays["values"], arrays["labels"]
    if labels.dtype.kind == "S":
        try:
            labels = np.char.decode(labels, "utf-8")
        except UnicodeDecodeError:
            raise InputError(f"{name}: the 'labels' array holds bytes that are not UTF-8 text") from None
    if labels.dtype.kind != "U" or labels.ndim != 1:
        raise InputError(f"{name}: 'labels' must be a 1-d array of strings, found dtype {labels.dtype.str} "
                         f"and shape {labels.shape}")
    if values.dtype.kind not in "fiu":
        raise InputError(f"{name}: 'values' must hold real numbers, found dtype {values.dtype.str}")
    n = labels.shape[0]
    if values.shape != (n, n):
        raise InputError(f"{name}: 'values' has shape {values.shape}, but 'labels' names {n} taxa "
                         f"(expected ({n}, {n}))")
    # the array was made here (or mapped copy-on-write): the checks may use it in place
    return DistanceMatrix.from_array(values, labels.tolist(), source=name, copy=False,
                                     dtype=np.float32 if values.dtype == np.float32 else None)


def _map_member(path: bytes | str, info) -> np.ndarray | None:
    """The stored npy member ``info`` of the zip file ``path`` memory-mapped copy-on-write, or
    None (not a file path, deflated, small, not a float array, or a layout numpy cannot map)."""
    import struct
    import zipfile

    if not isinstance(path, str) or info.compress_type != zipfile.ZIP_STORED or info.file_size < MMAP_MIN_BYTES:
        return None
    with open(path, "rb") as fh:
        fh.seek(info.header_offset)
        local = fh.read(30)  # the zip local file header (PKWARE APPNOTE 4.3.7)
        if len(local) < 30 or local[:4] != b"PK\x03\x04":
            return None
        name_len, extra_len = struct.unpack("<HH", local[26:30])
        start = info.header_offset + 30 + name_len + extra_len
        fh.seek(start)
        version = np.lib.format.read_magic(fh)
        if version == (1, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_1_0(fh)
        elif version in ((2, 0), (3, 0)):
            shape, fortran, dtype = np.lib.format.read_array_header_2_0(fh)
        else:
            return None
        offset = fh.tell()
    if fortran or dtype.hasobject or dtype.kind != "f" or not dtype.isnative or len(shape) != 2:
        return None
    if offset - start + dtype.itemsize * shape[0] * shape[1] > info.file_size:
        return None  # a truncated member: the reader gives the error in its words
    return np.memmap(path, dtype=dtype, mode="c", offset=offset, shape=shape)


# ----------------------------------------------------------------- writing
def _fmt(v: float) -> str:
    # repr is the shortest string that reads back to the same float: exact and deterministic.
    return "NA" if v != v else repr(v)


def format_matrix(dm: DistanceMatrix, fmt: str = "tsv") -> str | bytes:
    """The content of a matrix file in one of :data:`MATRIX_FORMATS`: text, or bytes for a binary format.

    Values are written with ``repr`` (the shortest text that reads back to
    the same float: exact and deterministic); missing entries as ``NA``
    (``?`` in NEXUS, NaN in npz).

    Examples
    --------
    >>> dm = DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"])
    >>> print(format_matrix(dm, "lower"), end="")
    2
    a
    b 1.0
    """
    _check_format(fmt)
    return REGISTRY[fmt].writer(dm)


def _write_delimited(dm: DistanceMatrix, sep: str) -> str:
    labels = list(dm.labels)
    buf = io.StringIO()
    csv.writer(buf, delimiter=sep, lineterminator="\n").writerow([""] + labels)
    parts = [buf.getvalue()]
    parts.extend(_rows_text(dm.values, [quote_cell(lab, sep) for lab in labels], sep, lower=False))
    return "".join(parts)


def _write_whitespace(dm: DistanceMatrix, lower: bool) -> str:
    labels = list(dm.labels)
    for lab in labels:
        if not lab or any(c.isspace() for c in lab):
            raise InputError(f"label '{lab}' contains white space, which the {'lower' if lower else 'square'} "
                             "format cannot hold; use tsv or csv")
    return "".join([f"{dm.n}\n"] + _rows_text(dm.values, labels, " ", lower=lower))


def _rows_text(vals: np.ndarray, heads: list, sep: str, lower: bool) -> list:
    """One text line per row: the head, then ``sep + value`` per cell.

    Formatting floats is the slow part, and distances computed from counts
    repeat a lot, so each distinct value is formatted once (numpy.unique) and
    rows are assembled as bytes from a fixed-width table of ``sep + cell``
    strings padded with NUL bytes, dropped after the gather.
    """
    n = vals.shape[0]
    if n < 50 or np.signbit(vals[vals == 0]).any():  # small, or a -0.0 that unique would merge with 0.0
        rows = vals.tolist()
        return [h + "".join(sep + _fmt(v) for v in (row[:i] if lower else row)) + "\n"
                for i, (h, row) in enumerate(zip(heads, rows))]
    uniq, inv = np.unique(vals, return_inverse=True)  # NaNs collapse into one
    cells = [_fmt(v) for v in uniq.tolist()]
    inv = inv.reshape(n, n)
    width = max(len(c) for c in cells) + len(sep)
    table = np.frombuffer("".join((sep + c).ljust(width, "\0") for c in cells).encode("ascii"),
                          dtype=np.uint8).reshape(len(cells), width)
    out = []
    block = max(1, (16 << 20) // (n * width))
    for b0 in range(0, n, block):
        gathered = table[inv[b0:b0 + block]]  # (rows, n, width)
        for r in range(gathered.shape[0]):
            i = b0 + r
            flat = (gathered[r, :i] if lower else gathered[r]).reshape(-1)
            out.append(heads[i] + flat[flat != 0].tobytes().decode("ascii") + "\n")
        del gathered
    return out


def quote_cell(cell: str, sep: str) -> str:
    if any(c in cell for c in (sep, '"', "\n", "\r")) or cell != cell.strip():
        return '"' + cell.replace('"', '""') + '"'
    return cell


# ----------------------------------------------------------------- formats
@dataclass(frozen=True)
class MatrixFormat:
    """One matrix file format.

    Attributes
    ----------
    name : str
        Its name for ``fmt`` / ``--in-format`` / ``--out-format``.
    extensions : tuple of str
        File extensions that name it (lower case, with the dot).
    description : str
        The layout, in words (help texts and docs).
    reader : callable
        ``reader(text, source) -> DistanceMatrix``; errors name ``source`` and the line.
    writer : callable
        ``writer(dm) -> str``, the whole file.
    recognise : callable or None
        ``recognise(text) -> bool``: the format of a file read without a
        known extension or an explicit format (else it is read as tsv).
    binary : bool
        The reader takes bytes, the writer returns bytes and ``recognise``
        looks at the first bytes (before any decoding), instead of text.
    """

    name: str
    extensions: tuple
    description: str
    reader: Callable = field(repr=False)
    writer: Callable = field(repr=False)
    recognise: Callable | None = field(default=None, repr=False)
    binary: bool = False


#: The matrix formats, read by :func:`read_matrix`, :func:`format_matrix` and
#: :func:`matrix_format` (dispatch, extensions, recognising a file), the
#: ``--in-format`` / ``--out-format`` choices and help, and the tests.
REGISTRY = {f.name: f for f in (
    MatrixFormat("tsv", (".tsv",), "a header row (its first cell empty or a name, then the labels), then one row "
                 "per label: the label, then its values, separated by tabs; a missing entry is an empty cell, NA "
                 "or nan",
                 lambda text, name: _read_delimited(text, name, "\t"), lambda dm: _write_delimited(dm, "\t")),
    MatrixFormat("csv", (".csv",), "the same separated by commas; a cell holding the separator or a quote is "
                 "quoted the usual CSV way",
                 lambda text, name: _read_delimited(text, name, ","), lambda dm: _write_delimited(dm, ",")),
    MatrixFormat("square", (), "first line the number of taxa, then one line per taxon: its name, then its "
                 "distances, separated by white space; a name may instead fill a field of 10 characters (spaces "
                 "inside, no separator before the first number)",
                 lambda text, name: _read_square(text, name, lower=False),
                 lambda dm: _write_whitespace(dm, lower=False), lambda text: _square_shape(text) == "square"),
    MatrixFormat("lower", (), "the same with only the entries below the diagonal",
                 lambda text, name: _read_square(text, name, lower=True),
                 lambda dm: _write_whitespace(dm, lower=True), lambda text: _square_shape(text) == "lower"),
    MatrixFormat("nexus", (".nex", ".nexus"), "a NEXUS file with a DISTANCES block (Maddison, Swofford & Maddison "
                 "1997): TRIANGLE=LOWER, UPPER or BOTH, with or without the diagonal and labels, MISSING=, "
                 "INTERLEAVE; taxa from a TAXA block or the rows; written as a TAXA block and the lower triangle "
                 "with its diagonal",
                 _read_nexus, _write_nexus, _is_nexus_distances),
    MatrixFormat("npz", (".npz",), "binary: numpy's .npz archive holding 'values' (n x n float64, or float32 "
                 "for a single-precision matrix, kept in float32) and 'labels' (n unicode strings); exact, and "
                 "fast to read for large matrices (a large one is memory-mapped); never unpickled",
                 _read_npz, _write_npz, _is_npz, binary=True),
)}
#: The format names, in the order help texts list them (the functions here read REGISTRY itself).
MATRIX_FORMATS = tuple(REGISTRY)
#: What a file is written in (and read as) when nothing else says.
DEFAULT_FORMAT = "tsv"


def format_table() -> str:
    """The matrix format table of docs/distances.md (markdown), made from :data:`REGISTRY`.

    Examples
    --------
    >>> print(format_table().splitlines()[0])
    | format | extensions | recognised from the content | layout |
    """
    lines = ["| format | extensions | recognised from the content | layout |", "| --- | --- | --- | --- |"]
    for f in REGISTRY.values():
        name = f"`{f.name}`" + (" (default)" if f.name == DEFAULT_FORMAT else "")
        exts = " ".join(f"`{e}`" for e in f.extensions) or "-"  # each also with .gz or .bz2 when reading
        lines.append(f"| {name} | {exts} | {'yes' if f.recognise else '-'} | {f.description} |")
    return "\n".join(lines) + "\n"


class OutputSet:
    """Stage several output files and publish them together.

    Each file is written to a temporary file in its target folder; nothing
    appears at a target path until :meth:`commit`, and on failure every
    temporary file is removed, so existing files stay exactly as they were.
    A path of ``-`` is written to standard output at commit.

    :meth:`commit` publishes the set all or nothing: it first moves each
    existing target aside to a backup name in the same folder, then renames
    every new file into place, then removes the backups. If any rename fails
    (or the command is interrupted), the new files are removed and the
    backups renamed back, so the folder holds exactly the old files again.

    A matrix whose format had to be guessed (no ``--out-format`` and no
    known extension) is written as tsv, and :meth:`commit` says so in one
    line on standard error.

    Examples
    --------
    >>> import tempfile, os
    >>> d = tempfile.mkdtemp()
    >>> with OutputSet() as out:
    ...     out.add_text(os.path.join(d, "a.txt"), "hello\\n")
    >>> from pathlib import Path
    >>> Path(d, "a.txt").read_text()
    'hello\\n'
    """

    def __init__(self):
        self._staged: list[tuple[str, str]] = []
        self._stdout: list[str] = []

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self.commit()
        else:
            self.discard()
        return False

    def add_text(self, path: str, text: str | bytes) -> None:
        """Stage ``text`` (or bytes, e.g. a binary matrix) for ``path`` (``-`` for standard output).

        A path ending in ``.gz`` or ``.bz2`` is written compressed, the same
        bytes on every run (no time or name in the gzip header).
        """
        if path == "-":
            self._stdout.append(text)
            return
        data = text.encode("utf-8") if isinstance(text, str) else bytes(text)
        data = _compress_for(path, data)
        folder = os.path.dirname(os.path.abspath(path))
        if not os.path.isdir(folder):
            raise InputError(f"{path}: output folder '{folder}' does not exist")
        if os.path.isdir(path):
            raise InputError(f"{path}: is a directory")
        real = os.path.realpath(path)
        for _, other in self._staged:
            if os.path.realpath(other) == real:  # the later text would silently replace the earlier
                raise InputError(f"{path}: two outputs of this command would write to this file")
        try:
            fd, tmp = tempfile.mkstemp(prefix=".seqdist-", suffix=".part", dir=folder)
        except OSError as exc:
            raise InputError(f"{path}: cannot write ({exc.strerror})") from None
        # Recorded at once, so discard() removes it whatever happens next.
        self._staged.append((tmp, path))
        try:
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
            os.chmod(tmp, 0o666 & ~_umask())
        except BaseException as exc:
            self._staged.pop()
            with contextlib.suppress(OSError):
                os.unlink(tmp)
            if isinstance(exc, OSError):
                raise InputError(f"{path}: cannot write ({exc.strerror or exc})") from None
            raise

    def add_matrix(self, path: str, dm: DistanceMatrix, fmt: str | None = None) -> None:
        """Stage a matrix file (format by option, else extension, else tsv, said at commit)."""
        self.add_text(path, format_matrix(dm, matrix_format(path, fmt)))

    def add_json(self, path: str, obj: object) -> None:
        """Stage a JSON document (keys in insertion order, two-space indent)."""
        self.add_text(path, json.dumps(to_jsonable(obj), indent=2, allow_nan=False) + "\n")

    def commit(self) -> None:
        """Publish every staged file, all or nothing, then the standard-output texts.

        Raises
        ------
        InputError
            When a rename fails; every target then holds what it held before,
            and no temporary or backup file is left.
        """
        staged, self._staged = self._staged, []
        reserved: list[str] = []              # backup names created (empty until a move)
        moved: list[tuple[str, str]] = []     # (backup, target): old files moved aside
        current = staged[0][1] if staged else ""
        try:
            for _tmp, path in staged:
                current = path
                if os.path.lexists(path):
                    reserved.append(_reserve_backup(path))
                    os.replace(path, reserved[-1])
                    moved.append((reserved[-1], path))
            for tmp, path in staged:
                current = path
                os.replace(tmp, path)
        except BaseException as exc:
            kept = _roll_back(staged, reserved, moved)
            for _tmp, path in staged:
                _GUESSED.discard(os.path.abspath(path))
            if isinstance(exc, OSError):
                msg = f"{current}: cannot write ({exc.strerror or exc}); "
                msg += ("no output file was changed" if not kept else
                        "the old contents of " + ", ".join(f"{t} are in {b}" for b, t in kept))
                raise InputError(msg) from None
            raise
        for bak, _ in moved:
            with contextlib.suppress(OSError):
                os.unlink(bak)
        for _tmp, path in staged:
            key = os.path.abspath(path)
            if key in _GUESSED:
                from seqdist.core.console import info

                _GUESSED.discard(key)
                info(f"{path}: no known matrix extension, wrote {DEFAULT_FORMAT} (choose with --out-format)")
        for text in self._stdout:
            if isinstance(text, str):
                sys.stdout.write(text)
            else:  # a binary matrix piped on
                sys.stdout.flush()
                sys.stdout.buffer.write(text)
        sys.stdout.flush()
        self._stdout = []

    def discard(self) -> None:
        for tmp, path in self._staged:
            _GUESSED.discard(os.path.abspath(path))
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        self._staged = []
        self._stdout = []


def _compress_for(path: str, data: bytes) -> bytes:
    """``data`` gzip- or bz2-compressed when the path says so, deterministically; else as it is."""
    low = path.lower()
    if low.endswith(".gz"):
        import gzip

        return gzip.compress(data, compresslevel=6, mtime=0)
    if low.endswith(".bz2"):
        import bz2

        return bz2.compress(data, 9)
    return data


def _roll_back(staged, reserved, moved) -> list:
    """Undo a failed commit: new files out, old files back, temporaries and unused backup names gone.

    A staged file whose temporary name is gone was renamed into place (even
    if the interruption came right after the rename), so its target is
    removed. Returns the (backup, target) pairs whose old file could not be
    moved back (kept, never deleted), normally none.
    """
    for tmp, path in staged:
        if not os.path.lexists(tmp):
            with contextlib.suppress(OSError):
                os.unlink(path)
    kept = []
    for bak, path in reversed(moved):
        try:
            os.replace(bak, path)
        except OSError:
            kept.append((bak, path))
    for bak in reserved[len(moved):]:  # reserved, but the old file was never moved there
        with contextlib.suppress(OSError):
            os.unlink(bak)
    for tmp, _ in staged:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
    return kept


def _reserve_backup(path: str) -> str:
    """A new, unused name beside ``path`` to move the old file to (created empty)."""
    fd, bak = tempfile.mkstemp(prefix=".seqdist-", suffix=".bak", dir=os.path.dirname(os.path.abspath(path)))
    os.close(fd)
    return bak


def check_distinct_outputs(outputs: dict) -> None:
    """Refuse two outputs of one command that name the same file, before any work.

    ``outputs`` maps what names each output (an option such as ``--json``)
    to its path (None when not asked for). Paths are compared after
    resolving links and ``..``; two outputs to standard output (``-``) are
    refused too, since their texts would run together.

    Raises
    ------
    InputError
        Naming both options and the path.

    Examples
    --------
    >>> check_distinct_outputs({"--out": "a.tsv", "--json": "b.json", "--changes": None})
    >>> check_distinct_outputs({"--out": "a.tsv", "--json": "./a.tsv"})
    Traceback (most recent call last):
    ...
    seqdist.core.errors.InputError: --out and --json both write to a.tsv: give each output its own file
    """
    seen: dict[str, str] = {}
    for what, path in outputs.items():
        if path is None:
            continue
        key = "-" if path == "-" else os.path.realpath(os.path.abspath(path))
        if key in seen:
            where = "standard output" if key == "-" else seen[key][1]
            raise InputError(f"{seen[key][0]} and {what} both write to {where}: give each output its own file")
        seen[key] = (what, path)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def to_jsonable(obj: object) -> Any:
    """Convert numpy scalars/arrays (and NaN/inf, as None) for JSON output."""
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, (np.bool_,)):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        f = float(obj)
        return f if np.isfinite(f) else None
    return obj


def write_matrix(path: str, dm: DistanceMatrix, fmt: str | None = None) -> None:
    """Write one matrix file atomically (``-`` for standard output).

    Examples
    --------
    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "d.csv")
    >>> write_matrix(p, DistanceMatrix.from_array([[0, 2], [2, 0]], ["a", "b"]))
    >>> from pathlib import Path
    >>> Path(p).read_text().splitlines()[1]
    'a,0.0,2.0'
    """
    with OutputSet() as out:
        out.add_matrix(path, dm, fmt)


def write_text(path: str, text: str) -> None:
    """Write one text file atomically (``-`` for standard output)."""
    with OutputSet() as out:
        out.add_text(path, text)


def iter_nonblank(text: str) -> Iterator[tuple[int, str]]:
    """(line number, line) for the non-blank, non-comment lines of a text."""
    for ln, line in enumerate(text.split("\n"), start=1):
        if line.strip() and not line.lstrip().startswith("#"):
            yield ln, line.rstrip("\r")
