"""One registry per family (issue 16): distance models, score transforms and formulas, matrix and
alignment formats. Every entry is frozen and complete; the command line's choices, its --help and
the docs tables are made from the entries; each model entry's flags match what the engine does, and
its distance matches the published formula evaluated here by hand; a new format is one entry.

Sources of the formulas (named again beside each):

* Jukes & Cantor 1969, Evolution of protein molecules (JC69).
* Kimura 1980, J. Mol. Evol. 16:111-120 (K80).
* Felsenstein 1981, J. Mol. Evol. 17:368-376 (F81 model); Tajima & Nei 1984, Mol. Biol. Evol.
  1:269-285 (the F81 distance form and the TN84 distance).
* Tamura 1992, Mol. Biol. Evol. 9:678-687 (T92).
* Tamura & Nei 1993, Mol. Biol. Evol. 10:512-526 (TN93 and its gamma form).
* Jin & Nei 1990, Mol. Biol. Evol. 7:82-102 (gamma forms of JC69 and K80).
* Lake 1994, PNAS 91:1455-1459 (paralinear distance).
* Zuckerkandl & Pauling 1965 (Poisson correction); Nei & Kumar 2000, Molecular Evolution and
  Phylogenetics, ch. 2 (its gamma form and the same substitution for F81 and T92), from memory.
* Kimura 1983, The Neutral Theory of Molecular Evolution, ch. 4 (protein formula), from memory.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os

import numpy as np
import pytest

from seqdist.core.errors import InputError
from seqdist.io import alignment as aln_io
from seqdist.io import matrices as mat_io
from seqdist.models import registry as models
from seqdist.scores import matrices as score_mx
from seqdist.scores import pairwise as score_pw

from conftest import EXAMPLES, ROOT, open_text

REGISTRIES = {
    "distance models": models.REGISTRY,
    "score transforms": score_mx.TRANSFORMS,
    "score formulas": score_pw.REGISTRY,
    "matrix formats": mat_io.REGISTRY,
    "alignment formats": aln_io.REGISTRY,
}
#: Text fields that may be empty (an entry with nothing more to say there).
MAY_BE_EMPTY = {"gamma_source", "notes"}


# ----------------------------------------------------------------- entries frozen and complete
@pytest.mark.parametrize("family", REGISTRIES)
def test_every_entry_is_frozen_and_complete(family):
    reg = REGISTRIES[family]
    assert reg, family
    for key, entry in reg.items():
        assert dataclasses.is_dataclass(entry) and type(entry).__dataclass_params__.frozen, (family, key)
        assert entry.name == key
        with pytest.raises(dataclasses.FrozenInstanceError):
            entry.name = "changed"
        for f in dataclasses.fields(entry):
            value = getattr(entry, f.name)
            assert not isinstance(value, (list, dict, set)), (key, f.name)  # nothing mutable inside
            if isinstance(value, str) and f.name not in MAY_BE_EMPTY:
                assert value.strip(), f"{family}: {key}.{f.name} is empty"
            if f.name in ("reader", "writer", "func"):
                assert callable(value), (key, f.name)


def test_model_entries_say_what_the_engine_needs():
    assert set(models.COUNT_LEVELS) == {"ts", "tn93", "full"}
    for m in models.REGISTRY.values():
        assert m.alphabets and set(m.alphabets) <= {"dna", "protein"}
        assert m.counts in models.COUNT_LEVELS and m.needs == models.COUNT_LEVELS[m.counts]
        assert not m.gamma_source or m.has_gamma  # a gamma source only where there is a gamma form
        assert (m.frequencies != "-") == (m.needs_frequencies or m.name in ("jc69", "k80", "logdet"))
    # one default per alphabet, for that alphabet
    assert models.DEFAULT_MODELS == {"dna": "k80", "protein": "poisson"}
    # the old names are views of the registry (other modules and tests import them)
    from seqdist.models import distances

    assert distances.DNA_MODELS == ("p", "jc69", "k80", "f81", "tn84", "t92", "tn93", "logdet")
    assert distances.PROTEIN_MODELS == ("p", "poisson", "kimura")
    assert distances.GAMMA_MODELS == {"jc69", "k80", "f81", "t92", "tn93", "poisson"}
    assert distances.FREQ_MODELS == {"f81", "tn84", "t92", "tn93"}
    assert set(distances.MODELS) == {(a, n) for n, m in models.REGISTRY.items() for a in m.alphabets}


@pytest.mark.parametrize("family", ["matrix formats", "alignment formats"])
def test_format_extensions_are_lower_case_and_name_one_format(family):
    seen = {}
    for f in REGISTRIES[family].values():
        assert isinstance(f.extensions, tuple)
        for ext in f.extensions:
            assert ext.startswith(".") and ext == ext.lower() and ext not in seen, (f.name, ext, seen.get(ext))
            seen[ext] = f.name


# ----------------------------------------------------------------- the command line reads them
def _options(command: str) -> dict:
    """``{option string: argparse action}`` of one sub-command, from the real parser."""
    import argparse

    from seqdist.cli import build_parser

    subs = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    return {s: a for a in subs.choices[command]._actions for s in a.option_strings}


def _help(command: str) -> str:
    import argparse

    from seqdist.cli import build_parser

    subs = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    return subs.choices[command].format_help()


def test_cli_choices_are_the_registry_names():
    from seqdist import simulate

    for command in ("distances", "run", "impact"):
        assert tuple(_options(command)["--model"].choices) == models.MODEL_NAMES
    tr = _options("scores")["--transform"]
    assert tuple(tr.choices) == tuple(score_mx.TRANSFORMS) and tr.default == score_mx.DEFAULT_TRANSFORM
    fo = _options("pairscores")["--formula"]
    assert tuple(fo.choices) == score_pw.FORMULAS and fo.default == score_pw.DEFAULT_FORMULA
    assert tuple(_options("simulate")["--model"].choices) == simulate.DNA_MODELS + simulate.PROTEIN_MODELS
    # every option naming a matrix format (scores' --in-format is a score-matrix file, distances' an alignment)
    matrix_options = {"convert": ("--in-format", "--out-format"), "tree": ("--in-format",),
                      "audit": ("--in-format", "--out-format"), "repair": ("--in-format", "--out-format"),
                      "impact": ("--in-format",), "distances": ("--out-format",), "scores": ("--out-format",),
                      "pairscores": ("--out-format",)}
    for command, flags in matrix_options.items():
        for flag in flags:
            assert tuple(_options(command)[flag].choices) == mat_io.MATRIX_FORMATS, (command, flag)


def test_model_names_are_matched_without_regard_to_case_as_before(tmp_path):
    from seqdist.cli import build_parser

    args = build_parser().parse_args(["distances", "a.fasta", "-o", "d.tsv", "--model", "JC69"])
    assert args.model == "jc69"


def test_cli_help_is_made_from_the_entries():
    text = _help("distances")
    assert models.model_guide() in text
    assert all(name in _options("distances")["--in-format"].help for name in aln_io.REGISTRY)
    assert aln_io.sniffed_format_names() in " ".join(text.split())
    assert "f81, tn84, t92, tn93" in _options("distances")["--freqs"].help
    assert score_mx.transform_guide() in _help("scores")
    assert score_pw.formula_guide() in _help("pairscores")
    convert = " ".join(_help("convert").split())
    for f in mat_io.REGISTRY.values():
        assert f"{f.name} {f.description}" in convert


def test_unknown_names_list_the_registry():
    from seqdist.models.distances import check_options

    with pytest.raises(InputError, match=r"unknown model 'nope' \(DNA: p, jc69, k80, f81, tn84, t92, tn93, "
                                         r"logdet; protein: p, poisson, kimura\)"):
        check_options("dna", "nope", None, "pairwise", "alignment", "skip")
    with pytest.raises(InputError,
                       match=r"unknown matrix format 'xml' \(choose from tsv, csv, square, lower, nexus, npz\)"):
        mat_io.format_matrix(_small(), "xml")
    with pytest.raises(InputError, match="unknown alignment format 'xml' .choose from clustal, emboss, fasta,"):
        aln_io.read_alignment(os.path.join(EXAMPLES, "protein_small.sto"), "xml")


# ----------------------------------------------------------------- the docs tables are made from them
DOC_TABLES = [
    ("docs/distances.md", models.model_table, models.REGISTRY),
    ("docs/distances.md", aln_io.format_table, aln_io.REGISTRY),
    ("docs/formats.md", mat_io.format_table, mat_io.REGISTRY),
    ("docs/scores.md", score_mx.transform_table, score_mx.TRANSFORMS),
    ("docs/scores.md", score_pw.formula_table, score_pw.REGISTRY),
]


@pytest.mark.parametrize("doc,table,reg", DOC_TABLES, ids=[t.__module__ + "." + t.__name__ for _, t, _ in DOC_TABLES])
def test_docs_tables_list_every_entry(doc, table, reg):
    text = open_text(os.path.join(ROOT, doc))
    made = table()
    assert made in text, f"{doc}: the table is not {table.__module__}.{table.__name__}() (regenerate it)"
    rows = made.splitlines()[2:]
    assert len(rows) == len(reg)
    for row, name in zip(rows, reg):
        assert row.startswith(f"| `{name}`")


# ----------------------------------------------------------------- each model against its published formula
# A C G T; first sequence along the rows. P1 = A<->G, P2 = C<->T, Q transversions.
N_DNA = np.array([[40, 2, 5, 1], [1, 30, 1, 3], [4, 1, 15, 2], [1, 4, 1, 20]], float)
PI = (0.3, 0.2, 0.25, 0.25)  # whole-alignment frequencies for the models that take them


def _dna_props():
    S = N_DNA.sum()
    P1 = (N_DNA[0, 2] + N_DNA[2, 0]) / S
    P2 = (N_DNA[1, 3] + N_DNA[3, 1]) / S
    p = 1 - np.trace(N_DNA) / S
    return S, P1, P2, p - P1 - P2, p


def _protein_counts():
    N = np.diag(np.full(20, 8.0))
    N[0, 1], N[3, 7] = 20, 10  # 30 mismatches in 190 columns
    return N


def _terms(model):
    """The published distance as terms (c_k, x_k) of d = sum_k c_k L(x_k), L(x) = -ln x."""
    S, P1, P2, Q, p = _dna_props()
    P = P1 + P2
    pA, pC, pG, pT = PI
    if model == "jc69":  # Jukes & Cantor 1969: d = -3/4 ln(1 - 4p/3)
        return [(0.75, 1 - 4 * p / 3)]
    if model == "k80":  # Kimura 1980: d = -1/2 ln(1 - 2P - Q) - 1/4 ln(1 - 2Q)
        return [(0.5, 1 - 2 * P - Q), (0.25, 1 - 2 * Q)]
    if model == "f81":  # Tajima & Nei 1984 form of F81: d = -B ln(1 - p/B), B = 1 - sum pi^2
        B = 1 - sum(x * x for x in PI)
        return [(B, 1 - p / B)]
    if model == "t92":  # Tamura 1992: d = -h ln(1 - P/h - Q) - (1 - h)/2 ln(1 - 2Q), h = 2 theta (1 - theta)
        theta = pC + pG
        h = 2 * theta * (1 - theta)
        return [(h, 1 - P / h - Q), ((1 - h) / 2, 1 - 2 * Q)]
    if model == "tn93":  # Tamura & Nei 1993, eq. 7
        pR, pY = pA + pG, pC + pT
        return [(2 * pA * pG / pR, 1 - pR * P1 / (2 * pA * pG) - Q / (2 * pR)),
                (2 * pC * pT / pY, 1 - pY * P2 / (2 * pC * pT) - Q / (2 * pY)),
                (2 * (pR * pY - pA * pG * pY / pR - pC * pT * pR / pY), 1 - Q / (2 * pR * pY))]
    if model == "tn84":  # Tajima & Nei 1984: d = -b ln(1 - p/b)
        F = N_DNA / S
        h = sum((F[i, j] + F[j, i]) ** 2 / (2 * PI[i] * PI[j]) for i in range(4) for j in range(i + 1, 4))
        b = (1 - sum(g * g for g in PI) + p * p / h) / 2
        return [(b, 1 - p / b)]
    if model == "poisson":  # Zuckerkandl & Pauling 1965: d = -ln(1 - p)
        N = _protein_counts()
        return [(1.0, np.trace(N) / N.sum())]
    return None


def _published(model, gamma=None):
    terms = _terms(model)
    if terms is not None:
        if gamma is None:
            return sum(-c * math.log(x) for c, x in terms)
        # the gamma form replaces -ln x by a (x^(-1/a) - 1): Jin & Nei 1990 (jc69, k80), Tamura & Nei 1993
        # (tn93), Nei & Kumar 2000 (poisson; f81 and t92 the same way), from memory for the last two
        return sum(c * gamma * (x ** (-1 / gamma) - 1) for c, x in terms)
    if model == "p":  # common practice: mismatches / compared columns
        return _dna_props()[4]
    if model == "kimura":  # Kimura 1983: d = -ln(1 - p - 0.2 p^2)
        N = _protein_counts()
        p = 1 - np.trace(N) / N.sum()
        return -math.log(1 - p - 0.2 * p * p)
    if model == "logdet":  # Lake 1994: d = -1/4 [ln det F - 1/2 (ln det Pi_x + ln det Pi_y)]
        F = N_DNA / N_DNA.sum()
        return -0.25 * (math.log(np.linalg.det(F)) - 0.5 * (np.log(F.sum(1)).sum() + np.log(F.sum(0)).sum()))
    raise AssertionError(f"no published check for model '{model}': add one here")


def _counts_for(entry):
    return N_DNA if "dna" in entry.alphabets else _protein_counts()


@pytest.mark.parametrize("name", models.MODEL_NAMES)
def test_each_model_matches_its_published_formula(name):
    from seqdist.models.distances import distances_from_counts

    entry = models.REGISTRY[name]
    pi = PI if entry.needs_frequencies else None
    d, _, reason = distances_from_counts(_counts_for(entry), name, base_frequencies=pi, variance=False)
    assert reason == 0
    assert float(d) == pytest.approx(_published(name), rel=1e-12)
    # the gamma flag is what the engine does: the gamma form where the entry has one, a refusal elsewhere
    if entry.has_gamma:
        dg, _, _ = distances_from_counts(_counts_for(entry), name, gamma=0.7, base_frequencies=pi, variance=False)
        assert float(dg) == pytest.approx(_published(name, 0.7), rel=1e-12) and dg > d
    else:
        with pytest.raises(InputError, match=f"model '{name}' has no gamma form"):
            distances_from_counts(_counts_for(entry), name, gamma=0.7, variance=False)


@pytest.mark.parametrize("name", models.MODEL_NAMES)
def test_model_flags_are_what_the_engine_does(name):
    from seqdist.io.alignment import Alignment
    from seqdist.models.distances import check_options, distances_from_counts, pairwise_distances

    entry = models.REGISTRY[name]
    N = _counts_for(entry)
    # base frequencies change the distance exactly when the entry says it takes them
    K = N.shape[0]
    flat, skew = np.full(K, 1 / K), np.linspace(1, 2, K) / np.linspace(1, 2, K).sum()
    d1 = distances_from_counts(N, name, base_frequencies=flat, variance=False)[0]
    d2 = distances_from_counts(N, name, base_frequencies=skew, variance=False)[0]
    assert (d1 != d2) == entry.needs_frequencies
    # the alphabets: accepted for its own, refused (naming the other alphabet) for the other
    for alphabet in ("dna", "protein"):
        if alphabet in entry.alphabets:
            assert check_options(alphabet, name.upper(), None, "pairwise", "alignment", "skip") == name
        else:
            with pytest.raises(InputError, match=f"model '{name}' is for"):
                check_options(alphabet, name, None, "pairwise", "alignment", "skip")
        assert (check_options(alphabet, None, None, "pairwise", "alignment", "skip") == name) == \
            (alphabet in entry.default_for)
    # the counts it needs: only mismatch-type counts ("ts") go through the byte-compare kernel
    seqs = ["ACGTACGTAA", "ACGTTCGTAC", "ACGAACGTCA"] if "dna" in entry.alphabets else \
        ["MKVLWQARND", "MKVLWEARNE", "MKILWQAKND"]
    aln = Alignment.from_sequences(["a", "b", "c"], seqs)
    if entry.counts == "ts":
        fast = pairwise_distances(aln, name, kernel="bytes", warn=False, progress=False).matrix.values
        ref = pairwise_distances(aln, name, kernel="gemm", warn=False, progress=False).matrix.values
        assert np.allclose(fast, ref, equal_nan=True)
    else:
        with pytest.raises(InputError, match="byte-compare kernel counts only mismatch-type data"):
            pairwise_distances(aln, name, kernel="bytes", warn=False, progress=False)


def test_every_model_has_a_published_check():
    for name in models.MODEL_NAMES:
        assert _terms(name) is not None or name in ("p", "kimura", "logdet"), name


# ----------------------------------------------------------------- formats: dispatch, and one entry is enough
def _small():
    from seqdist.core.matrix import DistanceMatrix

    return DistanceMatrix.from_array([[0, 1.5, np.nan], [1.5, 0, 0.25], [np.nan, 0.25, 0]], ["a", "b", "c"])


@pytest.mark.parametrize("fmt", mat_io.MATRIX_FORMATS)
def test_each_matrix_format_reads_what_it_writes_and_is_found_again(fmt, tmp_path):
    dm = _small()
    entry = mat_io.REGISTRY[fmt]
    back = entry.reader(entry.writer(dm), "x")
    assert back.labels == dm.labels and np.array_equal(back.values, dm.values, equal_nan=True)
    # its extensions choose it, for writing and for reading
    for ext in entry.extensions:
        assert mat_io.matrix_format(f"d{ext}") == fmt
        path = tmp_path / f"d{ext}"
        (path.write_bytes if entry.binary else path.write_text)(entry.writer(dm))
        assert np.array_equal(mat_io.read_matrix(str(path)).values, dm.values, equal_nan=True)
    # a file without a known extension is read as this format when the entry recognises its shape,
    # else as the default (tsv); an explicit format always wins
    path = tmp_path / "noext"
    (path.write_bytes if entry.binary else path.write_text)(entry.writer(dm))
    if entry.recognise is not None or fmt == mat_io.DEFAULT_FORMAT:
        assert np.array_equal(mat_io.read_matrix(str(path)).values, dm.values, equal_nan=True)
    else:
        with pytest.raises(InputError):  # csv text read as tsv: no tab-separated header
            mat_io.read_matrix(str(path))
    assert np.array_equal(mat_io.read_matrix(str(path), fmt).values, dm.values, equal_nan=True)


def _toy_matrix_format():
    from seqdist.core.matrix import DistanceMatrix

    def read(text, name):
        doc = json.loads(text)
        return DistanceMatrix.from_array(np.array(doc["values"], float), doc["labels"], source=name)

    def write(dm):
        return json.dumps({"labels": list(dm.labels), "values": dm.values.tolist()}) + "\n"

    return mat_io.MatrixFormat("toyjson", (".toyjson",), "a JSON document with labels and values", read, write,
                               lambda text: text.startswith('{"labels"'))


def test_a_new_matrix_format_is_one_entry(monkeypatch, tmp_path, capsys):
    # NEXUS and npz were added this way: registering an entry is all it takes for the readers,
    # the writers, the guessing by extension and by content, and the command line's choices.
    from seqdist.cli import main

    monkeypatch.setitem(mat_io.REGISTRY, "toyjson", _toy_matrix_format())
    src = tmp_path / "d.tsv"
    mat_io.write_matrix(str(src), _small())
    out = tmp_path / "d.toyjson"
    assert main(["convert", str(src), "-o", str(out)]) == 0  # format from the extension
    assert json.loads(out.read_text())["labels"] == ["a", "b", "c"]
    assert main(["convert", str(out), "-o", str(tmp_path / "back.tsv")]) == 0
    assert (tmp_path / "back.tsv").read_text() == src.read_text()
    plain = tmp_path / "plain"
    assert main(["convert", str(src), "-o", str(plain), "--out-format", "toyjson", "--quiet"]) == 0
    assert mat_io.read_matrix(str(plain))["a", "b"] == 1.5  # recognised from the content
    assert "toyjson" in _options("tree")["--in-format"].choices
    monkeypatch.delitem(mat_io.REGISTRY, "toyjson")
    capsys.readouterr()
    with pytest.raises(SystemExit) as exc:  # argparse's usage errors leave through the parser's error()
        main(["convert", str(src), "-o", "-", "--out-format", "toyjson"])
    assert exc.value.code == 2 and "invalid choice: 'toyjson'" in capsys.readouterr().err


def _write_with_biopython(tmp_path, fmt: str, ext: str):
    from Bio import AlignIO

    msa = AlignIO.read(os.path.join(EXAMPLES, "protein_small.sto"), "stockholm")
    for rec in msa:
        rec.annotations["molecule_type"] = "protein"  # NEXUS output needs it
    path = tmp_path / f"aln{ext}"
    AlignIO.write(msa, str(path), fmt)
    return path


@pytest.mark.parametrize("fmt,ext", [("fasta", ".fasta"), ("clustal", ".aln"), ("stockholm", ".sto"),
                                     ("nexus", ".nex"), ("phylip-relaxed", ".phy")])
def test_alignment_formats_are_found_by_extension_and_first_line(fmt, ext, tmp_path):
    # Files written by Biopython's AlignIO (an outside writer), read back through the registry.
    ref = aln_io.read_alignment(os.path.join(EXAMPLES, "protein_small.sto"))
    path = _write_with_biopython(tmp_path, fmt, ext)
    bare = tmp_path / "aln"
    bare.write_bytes(path.read_bytes())
    name = fmt.split("-")[0]  # phylip-relaxed files carry the phylip extension and first line
    assert aln_io.guess_path_format(str(path)) == name and aln_io.guess_path_format(str(bare)) is None
    for got in (aln_io.read_alignment(str(path)), aln_io.read_alignment(str(bare)),
                aln_io.read_alignment(str(bare), fmt.upper())):
        assert got.labels == ref.labels and np.array_equal(got.codes, ref.codes)


def test_alignment_registry_names_biopython_readers():
    from Bio import AlignIO

    biopython = set(AlignIO._FormatToIterator)
    for f in aln_io.REGISTRY.values():
        assert f.name == "fasta" or f.name in biopython, f.name  # fasta is our own parser
    assert aln_io.alignment_formats() == tuple(sorted(aln_io.REGISTRY))


def test_an_unrecognised_alignment_lists_the_formats_known_by_their_first_line(tmp_path):
    path = tmp_path / "x.txt"
    path.write_text("xx\n")
    with pytest.raises(InputError, match="line 1: .*expected FASTA, Clustal, Stockholm, NEXUS, PHYLIP or MSF, or"):
        aln_io.read_alignment(str(path))


def test_a_new_alignment_format_is_one_entry(monkeypatch, tmp_path):
    def read(text, name):
        rows = [line.split() for line in text.splitlines()[1:] if line.strip()]
        return [r[0] for r in rows], [r[1] for r in rows], None

    toy = aln_io.AlignmentFormat("toyaln", "toy", (".toyaln",), "a header line, then 'label sequence' lines",
                                 read, lambda line: line.startswith("#TOY"))
    monkeypatch.setitem(aln_io.REGISTRY, "toyaln", toy)
    text = "#TOY\na ACGTACGT\nb ACGTACGA\n"
    for name in ("x.toyaln", "x.txt"):  # by extension, then by first line
        path = tmp_path / name
        path.write_text(text)
        aln = aln_io.read_alignment(str(path))
        assert aln.labels == ("a", "b") and aln.alphabet == "dna"
    assert "toyaln" in aln_io.alignment_formats() and "toyaln" in aln_io.alignment_format_help()
    assert aln_io.read_alignment(str(tmp_path / "x.txt"), "TOYALN").length == 8


def test_score_formula_entries_decide_the_traceback():
    # fd needs the alignment (S_rand from its columns), cosine only the score: the worked example of
    # docs/scores.md (match +2, mismatch -1, gaps 2; a = AAC, b = AC): fd 100 ln 2, cosine 1 - 2/sqrt(24).
    from seqdist.scores.matrices import ScoreMatrix

    sm = ScoreMatrix.from_array([[2, -1], [-1, 2]], "AC")
    assert [f.name for f in score_pw.REGISTRY.values() if f.needs_path] == ["fd"]
    got = {name: score_pw.score_distances(["a", "b"], ["AAC", "AC"], sm, gap_open=2, gap_extend=2, formula=name,
                                         progress=False).dm["a", "b"] for name in score_pw.FORMULAS}
    assert got["fd"] == pytest.approx(100 * math.log(2), rel=1e-12)
    assert got["cosine"] == pytest.approx(1 - 2 / math.sqrt(6 * 4), rel=1e-12)


def test_transform_entries_are_what_the_report_writes():
    # the report's transform_formula and transform_source come from the entry (the JSON keys stay)
    from seqdist.scores.matrices import check_score_matrix, load_score_matrix

    sm = load_score_matrix("BLOSUM62")
    for name, t in score_mx.TRANSFORMS.items():
        rep = check_score_matrix(sm, name)
        assert (rep.data["transform"], rep.data["transform_formula"], rep.data["transform_source"]) == \
            (name, t.formula, t.source)
