"""Multiple sequence alignments read into small integer codes.

:func:`read_alignment` reads any format Biopython's ``AlignIO`` reads
(FASTA, Clustal, Stockholm, NEXUS, PHYLIP, MSF, ...), chosen by an explicit
format, else by the file's extension, else by its first line. gzip and bz2
files are decompressed first (recognised by their first bytes), and a final
``.gz`` or ``.bz2`` is looked through when the extension is read. FASTA is read
by a small parser of our own so that every error names the line; every other
format goes through Biopython.

Each residue becomes one byte (:attr:`Alignment.codes`):

* DNA/RNA (case ignored, ``U`` read as ``T``): ``A C G T`` are 0..3; the
  partial ambiguity codes ``R Y K M S W B D H V`` are 4..13;
* protein: the 20 standard amino acids ``ACDEFGHIKLMNPQRSTVWY`` are 0..19;
  ``B`` (D/N), ``Z`` (E/Q) and ``J`` (I/L) are 20..22;
* everything else that is allowed in an alignment (gaps ``-`` and ``.``,
  ``N``, ``X``, ``?``, ``~``, ``*``, letters outside the alphabet) is
  :data:`MISSING` (255): never compared.

Codes below :attr:`Alignment.n_states` are unambiguous residues. Partial
ambiguity codes are left out unless a caller asks to spread them over the
residues they stand for (:meth:`Alignment.state_table`).

Examples
--------
>>> aln = Alignment.from_sequences(["a", "b"], ["ACGT-", "acgun"])
>>> aln.alphabet, aln.codes.tolist()
('dna', [[0, 1, 2, 3, 255], [0, 1, 2, 3, 255]])
"""

from __future__ import annotations

import io
import os
import re
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Callable, Sequence

import numpy as np

from seqdist.core.errors import InputError

if TYPE_CHECKING:  # only for the annotations
    from numpy.typing import ArrayLike

__all__ = ["AlignmentFormat", "REGISTRY", "alignment_formats", "sniffed_format_names", "alignment_format_help",
           "format_table", "Alignment", "read_alignment", "guess_alphabet", "guess_path_format"]

MISSING = 255

DNA_STATES = "ACGT"
PROTEIN_STATES = "ACDEFGHIKLMNPQRSTVWY"
# IUPAC partial ambiguity codes (N, the fully ambiguous code, is simply missing).
DNA_AMBIGUITY = {"R": "AG", "Y": "CT", "K": "GT", "M": "AC", "S": "CG", "W": "AT",
                 "B": "CGT", "D": "AGT", "H": "ACT", "V": "ACG"}
PROTEIN_AMBIGUITY = {"B": "DN", "Z": "EQ", "J": "IL"}
GAP_SYMBOLS = "-.?~*"

ALPHABETS = ("auto", "dna", "protein")


# ----------------------------------------------------------------- formats
@dataclass(frozen=True)
class AlignmentFormat:
    """One alignment format.

    Attributes
    ----------
    name : str
        Its name for ``fmt`` / ``--in-format`` (Biopython's AlignIO name).
    title : str
        How messages and help texts name it.
    extensions : tuple of str
        File extensions that name it (lower case, with the dot).
    description : str
        What it is and how it is read.
    reader : callable
        ``reader(text, source) -> (labels, sequences, lines)``; ``lines``
        locates each record for messages (FASTA), else None.
    first_line : callable or None
        ``first_line(line) -> bool``: recognises the format from the first
        non-blank line of a file whose extension says nothing.
    """

    name: str
    title: str
    extensions: tuple
    description: str
    reader: Callable = field(repr=False)
    first_line: Callable | None = field(default=None, repr=False)


def _fasta_reader(text: str, name: str):
    return _parse_fasta(text, name)


def _biopython_reader(fmt: str) -> Callable:
    def read(text: str, name: str):
        labels, seqs = _parse_with_biopython(text, name, fmt)
        return labels, seqs, None

    return read


def _starts(*prefixes: str) -> Callable:
    return lambda line: line.upper().startswith(prefixes)


def _two_integers(line: str) -> bool:
    parts = line.split()
    return len(parts) == 2 and all(p.isdigit() for p in parts)


def _entry(name, title, extensions, description, first_line=None, reader=None) -> AlignmentFormat:
    return AlignmentFormat(name, title, extensions, description, reader or _biopython_reader(name), first_line)


#: The alignment formats, read by :func:`read_alignment` (dispatch, extensions, first lines), the
#: ``--in-format`` help and the tests. Extensions and first lines are tried in this order.
REGISTRY = {f.name: f for f in (
    _entry("fasta", "FASTA", (".fa", ".fas", ".fasta", ".fna", ".faa", ".ffn", ".fsa", ".fst", ".afa", ".afasta",
                              ".mfa", ".mfasta"),
           "'>' header lines; the record id is the header's first word; read by our own parser so that "
           "errors name the line", lambda line: line.startswith(">"), _fasta_reader),
    _entry("clustal", "Clustal", (".aln", ".clustal", ".clw", ".clustalw"), "Clustal blocks (Biopython)",
           _starts("CLUSTAL", "MUSCLE", "PROBCONS", "MSAPROBS", "KALIGN")),
    _entry("stockholm", "Stockholm", (".sto", ".sth", ".stk", ".stockholm"),
           "Stockholm (Biopython); must end with a '//' line", _starts("# STOCKHOLM")),
    _entry("nexus", "NEXUS", (".nex", ".nexus", ".nxs"),
           "a NEXUS DATA or CHARACTERS block (Biopython); mistakes name the line", _starts("#NEXUS")),
    _entry("phylip", "PHYLIP", (".phy", ".phylip", ".ph"),
           "PHYLIP (Biopython): the relaxed layout first, then strict 10-character names", _two_integers),
    _entry("msf", "MSF", (".msf",), "MSF (Biopython)",
           _starts("!!AA_MULTIPLE_ALIGNMENT", "!!NA_MULTIPLE_ALIGNMENT", "PILEUP")),
    _entry("maf", "MAF", (".maf",), "MAF 's' lines (Biopython); each line's size field is checked"),
    _entry("emboss", "emboss", (), "Biopython's AlignIO format 'emboss'"),
    _entry("fasta-m10", "fasta-m10", (), "Biopython's AlignIO format 'fasta-m10'"),
    _entry("mauve", "mauve", (), "Biopython's AlignIO format 'mauve' (XMFA)"),
    _entry("phylip-relaxed", "relaxed PHYLIP", (), "PHYLIP with names of any length (Biopython)"),
    _entry("phylip-sequential", "sequential PHYLIP", (), "PHYLIP with each sequence in one piece (Biopython)"),
)}


def alignment_formats() -> tuple[str, ...]:
    """Format names accepted by ``fmt`` / ``--in-format`` (the names of :data:`REGISTRY`, sorted).

    Examples
    --------
    >>> "stockholm" in alignment_formats()
    True
    """
    return tuple(sorted(REGISTRY))


def sniffed_format_names() -> str:
    """The formats recognised from their first line, as help texts and messages name them.

    Examples
    --------
    >>> sniffed_format_names()
    'FASTA, Clustal, Stockholm, NEXUS, PHYLIP, MSF'
    """
    return ", ".join(f.title for f in REGISTRY.values() if f.first_line is not None)


def format_table() -> str:
    """The alignment format table of docs/distances.md (markdown), made from :data:`REGISTRY`.

    Examples
    --------
    >>> print(format_table().splitlines()[2].split(" | ")[0])
    | `fasta`
    """
    lines = ["| format | extensions | recognised from the first line | how it is read |", "| --- | --- | --- | --- |"]
    for f in REGISTRY.values():
        exts = " ".join(f"`{e}`" for e in f.extensions) or "-"
        lines.append(f"| `{f.name}` | {exts} | {'yes' if f.first_line else '-'} | {f.description} |")
    return "\n".join(lines) + "\n"


def alignment_format_help() -> str:
    """The ``--in-format`` help of the commands that read an alignment.

    Examples
    --------
    >>> alignment_format_help().split(":")[0]
    'alignment format'
    """
    return f"alignment format: {', '.join(REGISTRY)} (default: from the extension or content)"


# ----------------------------------------------------------------- tables
def _build_tables():
    valid = np.zeros(256, dtype=bool)
    for c in range(ord("A"), ord("Z") + 1):
        valid[c] = valid[c + 32] = True
    for c in GAP_SYMBOLS:
        valid[ord(c)] = True
    luts = {}
    for name, states, amb, extra in (("dna", DNA_STATES, DNA_AMBIGUITY, {"U": "T"}),
                                     ("protein", PROTEIN_STATES, PROTEIN_AMBIGUITY, {})):
        lut = np.full(256, MISSING, dtype=np.uint8)
        for k, s in enumerate(states):
            lut[ord(s)] = lut[ord(s.lower())] = k
        for s, t in extra.items():
            lut[ord(s)] = lut[ord(s.lower())] = states.index(t)
        for k, s in enumerate(amb):
            lut[ord(s)] = lut[ord(s.lower())] = len(states) + k
        luts[name] = lut
    return valid, luts


_VALID, _LUT = _build_tables()
_NUC_LETTERS = np.zeros(256, dtype=bool)
for _c in "ACGTUN":
    _NUC_LETTERS[ord(_c)] = _NUC_LETTERS[ord(_c.lower())] = True
_LETTERS = np.zeros(256, dtype=bool)
for _c in range(ord("A"), ord("Z") + 1):
    _LETTERS[_c] = _LETTERS[_c + 32] = True


# ----------------------------------------------------------------- the type
@dataclass(frozen=True, eq=False)
class Alignment:
    """Record ids plus an (n, L) uint8 array of residue codes.

    Attributes
    ----------
    labels : tuple of str
        Record ids, unique, in file order.
    codes : numpy.ndarray, shape (n, L), uint8, read-only
        0 .. n_states-1 for unambiguous residues, then partial ambiguity
        codes, :data:`MISSING` (255) for gaps and anything not compared.
    alphabet : {"dna", "protein"}
    source : str
        Where it came from (a file name), used in error messages.

    Examples
    --------
    >>> aln = Alignment.from_sequences(["x", "y", "z"], ["ACGT", "AC-T", "ACRT"])
    >>> aln.n, aln.length, aln.n_states
    (3, 4, 4)
    >>> aln.take_columns([0, 0, 3]).codes.tolist()
    [[0, 0, 3], [0, 0, 3], [0, 0, 3]]
    """

    labels: tuple
    codes: np.ndarray
    alphabet: str
    source: str = "<alignment>"

    # -- construction ---------------------------------------------------
    @classmethod
    def from_sequences(cls, labels: Sequence[str], sequences: Sequence[str], alphabet: str = "auto",
                       source: str = "<alignment>") -> "Alignment":
        """Build from ids and aligned sequence strings (validated like a file).

        Examples
        --------
        >>> Alignment.from_sequences(["p", "q"], ["MKV", "MRV"]).alphabet
        'protein'
        """
        return _encode(list(labels), list(sequences), alphabet, source, lines=None)

    # -- views ----------------------------------------------------------
    @property
    def n(self) -> int:
        return len(self.labels)

    @property
    def length(self) -> int:
        """Number of columns."""
        return int(self.codes.shape[1])

    @property
    def states(self) -> str:
        """The unambiguous residues in code order."""
        return DNA_STATES if self.alphabet == "dna" else PROTEIN_STATES

    @property
    def n_states(self) -> int:
        return len(self.states)

    def __repr__(self) -> str:
        return f"Alignment(n={self.n}, length={self.length}, alphabet={self.alphabet!r}, source={self.source!r})"

    def residue_mask(self) -> np.ndarray:
        """Boolean (n, L): True where the residue is unambiguous."""
        return self.codes < self.n_states

    def complete_columns(self) -> np.ndarray:
        """Boolean (L,): columns unambiguous in every sequence."""
        return self.residue_mask().all(axis=0)

    def take_columns(self, columns: ArrayLike) -> "Alignment":
        """A new alignment of the given columns (indices, repeats allowed, or a boolean mask).

        Bootstrap resampling is ``aln.take_columns(rng.integers(0, aln.length, aln.length))``.

        Examples
        --------
        >>> aln = Alignment.from_sequences(["a", "b"], ["ACG", "ATG"])
        >>> aln.take_columns([1, 1]).codes.tolist()
        [[1, 1], [3, 3]]
        """
        cols = np.asarray(columns)
        if cols.dtype == bool:
            if cols.shape != (self.length,):
                raise InputError(f"column mask of length {cols.size} for {self.length} columns")
        else:
            cols = cols.astype(np.intp, copy=False)
            if cols.size and (cols.min() < 0 or cols.max() >= self.length):
                raise InputError(f"column index out of range 0..{self.length - 1}")
        codes = np.ascontiguousarray(self.codes[:, cols])
        codes.setflags(write=False)
        return Alignment(self.labels, codes, self.alphabet, self.source)

    def subset(self, labels: Sequence[str]) -> "Alignment":
        """The rows of the given record ids, in that order."""
        pos = {lab: i for i, lab in enumerate(self.labels)}
        try:
            idx = [pos[lab] for lab in labels]
        except KeyError as exc:
            raise InputError(f"{self.source}: unknown record id '{exc.args[0]}'") from None
        codes = np.ascontiguousarray(self.codes[idx])
        codes.setflags(write=False)
        return Alignment(tuple(labels), codes, self.alphabet, self.source)

    def state_table(self, partial: bool = False) -> np.ndarray:
        """(256, n_states) float64: how much each code counts towards each residue.

        Unambiguous residues are one-hot rows; with ``partial`` the partial
        ambiguity codes are spread evenly over the residues they stand for
        (``R`` = half ``A``, half ``G``); all other codes are zero rows.

        Examples
        --------
        >>> t = Alignment.from_sequences(["a"], ["ACGT"]).state_table(partial=True)
        >>> t[4].tolist()  # R
        [0.5, 0.0, 0.5, 0.0]
        """
        k = self.n_states
        table = np.zeros((256, k))
        table[np.arange(k), np.arange(k)] = 1.0
        if partial:
            amb = DNA_AMBIGUITY if self.alphabet == "dna" else PROTEIN_AMBIGUITY
            for j, members in enumerate(amb.values()):
                for s in members:
                    table[k + j, self.states.index(s)] = 1.0 / len(members)
        return table

    def residue_counts(self, partial: bool = False, columns: np.ndarray | None = None) -> np.ndarray:
        """Residue counts over the whole alignment (or the given column mask), per state.

        Examples
        --------
        >>> Alignment.from_sequences(["a", "b"], ["AAC-", "AGCT"]).residue_counts().tolist()
        [3.0, 2.0, 1.0, 1.0]
        """
        codes = self.codes if columns is None else self.codes[:, columns]
        hist = np.bincount(codes.ravel(), minlength=256).astype(np.float64)
        return hist @ self.state_table(partial)


# ----------------------------------------------------------------- reading
def read_alignment(path: str, fmt: str | None = None, alphabet: str = "auto") -> Alignment:
    """Read and encode an alignment file.

    Parameters
    ----------
    path : str
        File path, or ``-`` for standard input; gzip or bz2 content is
        decompressed first (recognised by its first bytes).
    fmt : str, optional
        A Biopython AlignIO format name (``fasta``, ``clustal``,
        ``stockholm``, ``nexus``, ``phylip``, ``phylip-relaxed``, ``msf``,
        ...). By default from the extension (looking through a final ``.gz``
        or ``.bz2``), else from the first line.
    alphabet : {"auto", "dna", "protein"}
        ``auto`` calls it DNA when at least 90% of the letters are
        ``A C G T U N`` (common practice).

    Returns
    -------
    Alignment

    Raises
    ------
    InputError
        Missing or binary file, unknown format, no records, empty
        sequences, unequal lengths, duplicate ids, characters that are not
        residues or gap symbols, or a parser failure; the message names the
        file and the record or line.

    Examples
    --------
    >>> import tempfile, os
    >>> p = os.path.join(tempfile.mkdtemp(), "a.fasta")
    >>> from pathlib import Path
    >>> _ = Path(p).write_text(">x first\\nACGT\\n>y\\nAC-T\\n")
    >>> aln = read_alignment(p)
    >>> aln.labels, aln.codes.shape
    (('x', 'y'), (2, 4))
    """
    from seqdist.io.matrices import read_text

    if alphabet not in ALPHABETS:
        raise InputError(f"unknown alphabet '{alphabet}' (choose from {', '.join(ALPHABETS)})")
    if fmt is not None:
        fmt = fmt.lower()
        if fmt not in alignment_formats():
            raise InputError(f"unknown alignment format '{fmt}' (choose from {', '.join(alignment_formats())})")
    text = read_text(path, "alignment file")
    name = "<stdin>" if path == "-" else path
    if not text.strip():
        raise InputError(f"{name}: empty file, no sequences")
    if fmt is None:
        fmt = _format_from_extension(path) or _sniff_format(text, name)
    labels, seqs, lines = REGISTRY[fmt].reader(text, name)
    return _encode(labels, seqs, alphabet, name, lines)


def _format_from_extension(path: str) -> str | None:
    from seqdist.io.matrices import strip_compression_suffix

    base = strip_compression_suffix(path).lower()  # aln.fasta.gz is FASTA
    for f in REGISTRY.values():
        if f.extensions and base.endswith(f.extensions):
            return f.name
    return None


def _sniff_format(text: str, name: str) -> str:
    first = text.lstrip().split("\n", 1)[0].strip()
    for f in REGISTRY.values():
        if f.first_line is not None and f.first_line(first):
            return f.name
    *most, last = sniffed_format_names().split(", ")
    raise InputError(f"{name}: line 1: not a recognisable alignment (starts with {first[:40]!r}); "
                     f"expected {', '.join(most)} or {last}, or give --in-format")


def _parse_fasta(text: str, name: str):
    """(ids, sequences, header line numbers) with errors naming the line."""
    labels: list[str] = []
    chunks: list[list[str]] = []
    lines: list[int] = []
    cur = None
    for ln, line in enumerate(text.split("\n"), start=1):
        if line.startswith(">"):
            title = line[1:].strip()
            if not title:
                raise InputError(f"{name}: line {ln}: record without an id (empty '>' line)")
            labels.append(title.split(None, 1)[0])
            lines.append(ln)
            cur = []
            chunks.append(cur)
        elif cur is None:
            if line.strip():
                raise InputError(f"{name}: line {ln}: not a FASTA alignment: expected a '>' header line, "
                                 f"found {line.strip()[:40]!r}")
        else:
            cur.append(line)
    if not labels:
        raise InputError(f"{name}: no sequences found")
    seqs = ["".join("".join(c).split()) for c in chunks]
    # Header line plus residues per following line, to name the line of a bad character.
    return labels, seqs, [(h, chunk) for h, chunk in zip(lines, chunks)]


class _Truncated(ValueError):
    """The parser asked for more lines after the end of the file."""


class _EndGuard(io.StringIO):
    """A text handle that fails, instead of returning '' forever, when a parser keeps reading past the end.

    Biopython 1.8x's Clustal reader loops on ``readline()`` until it sees a
    non-blank line, so a file with a header and no sequence block would spin
    at 100% CPU for ever; every format is read through this guard.
    """

    _END_READS = 100

    def __init__(self, text: str):
        super().__init__(text)
        self._ends = 0

    def readline(self, size=-1):
        line = super().readline(size)
        if not line and size != 0:
            self._ends += 1
            if self._ends > self._END_READS:
                raise _Truncated("the file ends before the alignment does (truncated?)")
        return line


def _parse_with_biopython(text: str, name: str, fmt: str):
    from Bio import AlignIO

    _check_layout(text, name, fmt)
    tries = [fmt] if fmt != "phylip" else ["phylip-relaxed", "phylip"]
    err = None
    for f in tries:
        try:
            msa = AlignIO.read(_EndGuard(text), f)
            labels, seqs = [r.id for r in msa], [str(r.seq) for r in msa]
        except MemoryError:
            raise
        except Exception as exc:  # a third-party parser failing on user input: the input is bad
            err = exc
            continue
        if f.startswith("phylip"):
            _check_phylip(text, name, labels, seqs)
        if f == "nexus":
            _check_nexus_ids(text, name, labels)
        return labels, seqs
    if isinstance(err, _Truncated):
        last = text.rstrip("\n").count("\n") + 1
        raise InputError(f"{name}: line {last}: the file ends where the {fmt} alignment should go on "
                         "(truncated, or a header with no sequences?)")
    if fmt == "nexus":
        hint = _nexus_error(text, name, err)
        if hint:
            raise InputError(hint)
    msg = " ".join(str(err).split())[:200] or type(err).__name__
    if isinstance(err, RuntimeError) and "StopIteration" in msg:
        msg = "the file ends before the alignment does (truncated?)"
    if "same length" in msg:
        msg = "sequences have unequal lengths, so this is not an alignment"
    if "No records found" in msg:
        msg = "no alignment found: the file is empty, truncated or in another format"
    raise InputError(f"{name}: not a readable {fmt} alignment ({msg})")


def _check_layout(text: str, name: str, fmt: str) -> None:
    """Truncation checks Biopython does not make, for formats that state where they end or how long a row is."""
    if fmt == "stockholm" and not re.search(r"(?m)^//[ \t\r]*$", text):
        last = text.rstrip("\n").count("\n") + 1
        raise InputError(f"{name}: line {last}: the Stockholm alignment does not end with a '//' line "
                         "(truncated?)")
    if fmt == "maf":
        for ln, line in enumerate(text.split("\n"), start=1):
            if not line.startswith("s "):
                continue
            fields = line.split()
            size = fields[3] if len(fields) == 7 else ""
            if not size.isdigit():
                raise InputError(f"{name}: line {ln}: a MAF 's' line needs 7 fields (s, source, start, size, "
                                 "strand, source size, text); this one is incomplete (truncated?)")
            held = len(fields[6]) - fields[6].count("-")
            if held != int(size):
                raise InputError(f"{name}: line {ln}: the 's' line gives size {size} but holds {held} residues "
                                 "(truncated?)")


def _check_phylip(text: str, name: str, labels: list, seqs: list) -> None:
    head = text.lstrip().split("\n", 1)[0].split()
    if len(head) >= 2 and head[0].isdigit() and head[1].isdigit():
        ntax, nchar = int(head[0]), int(head[1])
        if len(labels) != ntax or any(not lab for lab in labels) or any(len(s) != nchar for s in seqs):
            raise InputError(f"{name}: line 1: the PHYLIP header announces {ntax} sequences of {nchar} columns, "
                             "but the records that follow are missing or incomplete (truncated?)")


# ----------------------------------------------------------------- NEXUS messages
def _nexus_rows(text: str):
    """(line, label, residues) for each line of the first MATRIX command; a best-effort scan for messages.

    Comments in square brackets are blanked (keeping line breaks); a label
    may be quoted. Non-interleaved rows that wrap over several lines are
    misread, which is why this only serves error messages.
    """
    clean = re.sub(r"\[[^\]]*\]", lambda m: re.sub(r"[^\n]", " ", m.group(0)), text)
    m = re.search(r"(?i)(^|;)\s*matrix\b", clean, flags=re.M)
    if not m:
        return None, []
    start = m.end()
    end = clean.find(";", start)
    body = clean[start:] if end < 0 else clean[start:end]
    first = clean.count("\n", 0, m.end()) + 1
    rows = []
    for off, line in enumerate(body.split("\n")):
        line = line.strip()
        if not line:
            continue
        q = re.match(r"'((?:[^']|'')*)'\s*(.*)$", line)
        if q:
            label, rest = q.group(1).replace("''", "'"), q.group(2)
        else:
            parts = line.split(None, 1)
            label, rest = parts[0], parts[1] if len(parts) > 1 else ""
        rows.append((first + off, label, "".join(rest.split())))
    return first, rows


def _nexus_dims(text: str):
    """{'ntax': (value, line), 'nchar': (value, line)} from DIMENSIONS commands."""
    out = {}
    for m in re.finditer(r"(?i)\b(ntax|nchar)\s*=\s*(\d+)", text):
        out.setdefault(m.group(1).lower(), (int(m.group(2)), text.count("\n", 0, m.start()) + 1))
    return out


def _nexus_error(text: str, name: str, err) -> str | None:
    """A message naming the line for the NEXUS mistakes Biopython reports without one."""
    msg = " ".join(str(err).split())
    m = re.match(r"Unknown command: (\S+)", msg)
    if m:
        cmd = m.group(1)
        hit = re.search(rf"(?i)(^|;)\s*({re.escape(cmd)})\b", text, flags=re.M)
        where = f"line {text.count(chr(10), 0, hit.start(2)) + 1}: " if hit else ""
        return (f"{name}: {where}unknown command '{cmd}' in the NEXUS DATA/CHARACTERS block "
                "(not a readable nexus alignment)")
    if msg.startswith("Unmatched ["):
        pos = _unmatched_bracket(text)
        where = f"line {text.count(chr(10), 0, pos) + 1}: " if pos is not None else ""
        return f"{name}: {where}a comment opened with '[' is never closed (not a readable nexus alignment)"
    dims = _nexus_dims(text)
    _, rows = _nexus_rows(text)
    totals: dict = {}
    for ln, label, res in rows:
        first_ln, total = totals.get(label, (ln, 0))
        totals[label] = (first_ln, total + len(res))
    if "taxa" in msg.lower() and "ntax" in dims:
        k, dl = dims["ntax"]
        found = f"the matrix has {len(totals)} rows" if totals else "the matrix does not match"
        return f"{name}: line {dl}: the dimensions give ntax={k}, but {found} (not a readable nexus alignment)"
    if "nchar" in dims and ("Nchar" in msg or isinstance(err, (RuntimeError, StopIteration))):
        k, dl = dims["nchar"]
        for label, (ln, total) in totals.items():
            if total != k:
                return (f"{name}: line {ln}: taxon '{label}' has {total} characters, but the dimensions "
                        f"(line {dl}) give nchar={k} (not a readable nexus alignment)")
        return (f"{name}: line {dl}: the matrix does not hold nchar={k} characters for every taxon "
                "(not a readable nexus alignment)")
    return None


def _unmatched_bracket(text: str):
    depth, pos = 0, None
    for i, ch in enumerate(text):
        if ch == "[":
            if depth == 0:
                pos = i
            depth += 1
        elif ch == "]" and depth:
            depth -= 1
    return pos if depth else None


def _check_nexus_ids(text: str, name: str, labels: list) -> None:
    # Biopython renames a repeated taxon 'x' to 'x.copy'; ids must be unique, so that is an error here.
    have = set(labels)
    for lab in labels:
        if lab.endswith(".copy") and lab[:-5] in have and lab not in text:
            _, rows = _nexus_rows(text)
            lines = [ln for ln, label, _ in rows if label == lab[:-5]]
            at = f" (lines {lines[0]} and {lines[1]})" if len(lines) >= 2 else ""
            raise InputError(f"{name}: duplicate taxon '{lab[:-5]}' in the NEXUS matrix{at}; ids must be unique")


def _where(labels, lines, i):
    return f"record '{labels[i]}'" + (f" (line {lines[i][0]})" if lines else "")


def _encode(labels: list, seqs: list, alphabet: str, name: str, lines) -> Alignment:
    from seqdist.core.console import one_line
    from seqdist.core.matrix import bad_label_char

    if alphabet not in ALPHABETS:
        raise InputError(f"unknown alphabet '{alphabet}' (choose from {', '.join(ALPHABETS)})")
    n = len(labels)
    if n == 0:
        raise InputError(f"{name}: no sequences found")
    if len(seqs) != n:
        raise InputError(f"{name}: {n} ids for {len(seqs)} sequences")
    seen: dict[str, int] = {}
    for i, lab in enumerate(labels):
        lab = str(lab)
        if not lab:
            raise InputError(f"{name}: record {i + 1} has an empty id")
        bad = bad_label_char(lab)
        if bad is not None:
            at = f"line {lines[i][0]}: " if lines else ""
            raise InputError(f"{name}: {at}record {i + 1} id '{one_line(lab)}' holds a control character "
                             f"({one_line(bad)}); ids must be printable text")
        if lab in seen:
            j = seen[lab]
            at = f", lines {lines[j][0]} and {lines[i][0]}" if lines else ""
            raise InputError(f"{name}: duplicate record id '{lab}' (records {j + 1} and {i + 1}{at}); "
                             "ids must be unique")
        seen[lab] = i
    L = len(seqs[0])
    for i, s in enumerate(seqs):
        if len(s) != L:
            raise InputError(f"{name}: {_where(labels, lines, i)} has {len(s)} columns but "
                             f"{_where(labels, lines, 0)} has {L}: not an alignment (sequences must have "
                             "equal lengths)")
    if L == 0:
        raise InputError(f"{name}: the sequences are empty (no columns)")
    joined = "".join(seqs)
    try:
        raw = np.frombuffer(joined.encode("ascii"), dtype=np.uint8).reshape(n, L)
    except UnicodeEncodeError as exc:
        i, k = divmod(exc.start, L)
        raise InputError(f"{name}: {_where(labels, lines, i)}: column {k + 1}: character "
                         f"{joined[exc.start]!r} is not a residue or gap symbol") from None
    bad = ~_VALID[raw]
    if bad.any():
        i, k = (int(x) for x in np.argwhere(bad)[0])
        where = _where(labels, lines, i)
        if lines:
            where = f"record '{labels[i]}' (line {_fasta_line(seqs, lines, i, k)})"
        raise InputError(f"{name}: {where}: column {k + 1}: character {chr(raw[i, k])!r} "
                         "is not a residue or gap symbol")
    hist = np.bincount(raw.ravel(), minlength=256)
    letters = int(hist[_LETTERS].sum())
    if letters == 0:
        raise InputError(f"{name}: no residues, only gap symbols")
    nuc = int(hist[_NUC_LETTERS].sum())
    if alphabet == "auto":
        alphabet = _alphabet_from_hist(hist)
    elif alphabet == "dna" and nuc < 0.5 * letters:
        from seqdist.core.console import warn

        warn(f"{name}: forced to DNA, but {100 * (letters - nuc) / letters:.0f}% of the letters are not "
             "nucleotides; they are left out of every comparison")
    codes = _LUT[alphabet][raw]
    codes.setflags(write=False)
    return Alignment(tuple(str(x) for x in labels), codes, alphabet, name)


def _alphabet_from_hist(hist: np.ndarray) -> str:
    # DNA when at least 90% of the letters are A C G T U N (common practice).
    return "dna" if int(hist[_NUC_LETTERS].sum()) >= 0.9 * int(hist[_LETTERS].sum()) else "protein"


def guess_alphabet(sequences: Sequence[str]) -> str:
    """``"dna"`` when at least 90% of the letters are ``A C G T U N`` (case ignored), else ``"protein"``.

    The rule :func:`read_alignment` applies with ``alphabet="auto"`` (common
    practice); gaps and other symbols are not letters and do not count.

    Examples
    --------
    >>> guess_alphabet(["ACGTN-", "acgu"]), guess_alphabet(["MKVLW"])
    ('dna', 'protein')
    """
    hist = np.zeros(256, dtype=np.int64)
    for s in sequences:
        hist += np.bincount(np.frombuffer(s.encode("utf-8", "replace"), dtype=np.uint8), minlength=256)
    return _alphabet_from_hist(hist)


def _fasta_line(seqs, lines, i, k):
    # Only on the error path: walk the record's lines to the one holding column k.
    header, chunk = lines[i]
    seen = 0
    for off, line in enumerate(chunk, start=1):
        seen += len("".join(line.split()))
        if seen > k:
            return header + off
    return header


def guess_path_format(path: str) -> str | None:
    """The format implied by a file name's extension (through ``.gz``/``.bz2``), or None.

    Examples
    --------
    >>> guess_path_format("aln.fasta.gz"), guess_path_format("aln.txt")
    ('fasta', None)
    """
    return _format_from_extension(os.fspath(path))
