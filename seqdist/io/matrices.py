"""Matrix files and safe output.

Formats (see the outside contract): ``tsv``, ``csv``, ``square`` and
``lower``, one :class:`MatrixFormat` entry each in :data:`REGISTRY` (its
extensions, reader, writer, how it is recognised and a description). A new
format is its reader and writer here plus one entry.

The format is taken from an explicit option, else the extension (``.tsv``,
``.csv``), else tsv. When reading a file with another extension whose first
line is a lone integer, ``square`` or ``lower`` is recognised from its shape.

Every file is written atomically: to a temporary file in the target folder,
then renamed, so a failed command never leaves a partial file and never
touches an existing one. ``-`` means standard input or output.
"""

from __future__ import annotations

import contextlib
import csv
import io
import json
import os
import sys
import tempfile
from dataclasses import dataclass, field
from typing import Callable, Iterator

import numpy as np

from seqdist.core.errors import InputError
from seqdist.core.matrix import DistanceMatrix, bad_label_char

__all__ = ["MatrixFormat", "REGISTRY", "MATRIX_FORMATS", "DEFAULT_FORMAT", "format_table", "read_text",
           "matrix_format", "read_matrix", "read_pairs", "format_matrix", "quote_cell", "OutputSet",
           "check_distinct_outputs", "to_jsonable", "write_matrix", "write_text", "iter_nonblank"]

_NA = {"", "na", "nan"}


# ----------------------------------------------------------------- reading
def read_text(path: str, what: str = "file") -> str:
    """Whole text of a file (or standard input for ``-``), with clear errors."""
    if path == "-":
        data = sys.stdin.buffer.read()
        name = "<stdin>"
    else:
        name = path
        try:
            with open(path, "rb") as fh:
                data = fh.read()
        except FileNotFoundError:
            raise InputError(f"{path}: no such {what}") from None
        except IsADirectoryError:
            raise InputError(f"{path}: is a directory, not a {what}") from None
        except PermissionError:
            raise InputError(f"{path}: permission denied") from None
        except OSError as exc:
            raise InputError(f"{path}: cannot read ({exc.strerror})") from None
    if b"\x00" in data[:65536]:
        raise InputError(f"{name}: binary data, not a text {what}")
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(f"{name}: line {line}: not UTF-8 text") from None
    return text


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
    """The format whose extensions hold the path's extension, else None."""
    ext = os.path.splitext(path)[1].lower()
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
    first = text.lstrip("\n").split("\n", 1)[0].strip()
    if not first.isdigit():
        return None
    lines = [ln for ln in text.split("\n")[1:] if ln.strip()]
    if lines and len(lines[0].split()) == 1:
        return "lower"
    return "square"


def _recognise(text: str) -> str | None:
    """The first format whose ``recognise`` accepts the text, else None."""
    for f in REGISTRY.values():
        if f.recognise is not None and f.recognise(text):
            return f.name
    return None


def read_matrix(path: str, fmt: str | None = None) -> DistanceMatrix:
    """Read and validate a distance matrix file.

    Parameters
    ----------
    path : str
        File path, or ``-`` for standard input.
    fmt : str, optional
        One of :data:`MATRIX_FORMATS` (``tsv``, ``csv``, ``square``,
        ``lower``); by default from the extension, else from the content,
        else tsv (see the module docs).

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
    text = read_text(path, "matrix file")
    name = "<stdin>" if path == "-" else path
    if not text.strip():
        raise InputError(f"{name}: empty file")
    if fmt is None and _by_extension(path) is None:
        fmt = _recognise(text)
    return REGISTRY[_format_for(path, fmt)].reader(text, name)


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


def _read_square(text: str, name: str, lower: bool) -> DistanceMatrix:
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
    values = np.full((n, n), np.nan)
    for i, row in enumerate(rows):
        values[i, :len(row)] = row
    if lower:
        iu = np.triu_indices(n, 1)
        values[iu] = values.T[iu]
        np.fill_diagonal(values, 0.0)
    return DistanceMatrix.from_array(values, labels, source=name)


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


# ----------------------------------------------------------------- writing
def _fmt(v: float) -> str:
    # repr is the shortest string that reads back to the same float: exact and deterministic.
    return "NA" if v != v else repr(v)


def format_matrix(dm: DistanceMatrix, fmt: str = "tsv") -> str:
    """The text of a matrix file in one of :data:`MATRIX_FORMATS`.

    Values are written with ``repr`` (the shortest text that reads back to
    the same float: exact and deterministic); missing entries as ``NA``.

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
    """

    name: str
    extensions: tuple
    description: str
    reader: Callable = field(repr=False)
    writer: Callable = field(repr=False)
    recognise: Callable | None = field(default=None, repr=False)


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
                 "distances, separated by white space",
                 lambda text, name: _read_square(text, name, lower=False),
                 lambda dm: _write_whitespace(dm, lower=False), lambda text: _square_shape(text) == "square"),
    MatrixFormat("lower", (), "the same with only the entries below the diagonal",
                 lambda text, name: _read_square(text, name, lower=True),
                 lambda dm: _write_whitespace(dm, lower=True), lambda text: _square_shape(text) == "lower"),
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
        exts = " ".join(f"`{e}`" for e in f.extensions) or "-"
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

    def add_text(self, path: str, text: str) -> None:
        """Stage ``text`` for ``path`` (``-`` for standard output)."""
        if path == "-":
            self._stdout.append(text)
            return
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
            with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
                fh.write(text)
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

    def add_json(self, path: str, obj) -> None:
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
            sys.stdout.write(text)
        sys.stdout.flush()
        self._stdout = []

    def discard(self) -> None:
        for tmp, path in self._staged:
            _GUESSED.discard(os.path.abspath(path))
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        self._staged = []
        self._stdout = []


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


def to_jsonable(obj):
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
