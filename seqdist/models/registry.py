"""The distance models: one frozen entry each, read by the engine, the CLI, the docs and the tests.

A new model is its formula and variance in :mod:`seqdist.models.distances`
(the branch of ``_evaluate`` that computes it, and its exact limit in
``_exact_args`` or ``_exact_values``) plus one entry here. The entry says
which alphabets it is for, whether it has a gamma form, whether it needs
base frequencies and which per-pair counts it needs; option checks, error
messages, the ``--model`` choices and help, the count level, the model table
in docs/distances.md (:func:`model_table`) and the tests read it.

The formula text is the one of docs/distances.md: ``L(x) = -ln x``, or
``a (x^(-1/a) - 1)`` in the gamma form.
"""

from __future__ import annotations

from dataclasses import dataclass

from seqdist.core.errors import InputError

__all__ = ["DistanceModel", "REGISTRY", "COUNT_LEVELS", "MODEL_NAMES", "DNA_MODELS", "PROTEIN_MODELS",
           "GAMMA_MODELS", "FREQ_MODELS", "DEFAULT_MODELS", "get", "models_for", "model_guide", "model_table"]

#: What a model needs from each pair (the count level of the engine).
COUNT_LEVELS = {
    "ts": "compared columns and mismatches (DNA: transitions and transversions)",
    "tn93": "compared columns, A<->G and C<->T transitions, transversions",
    "full": "the pair's full count matrix (4 x 4)",
}

_ALPHABET_NAMES = {"dna": "DNA", "protein": "protein"}


@dataclass(frozen=True)
class DistanceModel:
    """One distance model.

    Attributes
    ----------
    name : str
        Its name on the command line and in Python.
    alphabets : tuple of str
        ``"dna"``, ``"protein"`` or both (``p``).
    formula : str
        The distance, as in docs/distances.md.
    source : str
        Where the distance comes from.
    frequencies : str
        Which base frequencies it uses (``-`` for none), as in the docs table.
    needs_frequencies : bool
        Whether it takes base frequencies (``--freqs alignment|pair``).
    has_gamma : bool
        Whether it has a gamma form (``--gamma``).
    gamma_source : str
        Where the gamma form comes from (empty: see the docs' text).
    counts : str
        What it needs from each pair, a key of :data:`COUNT_LEVELS`; the
        compiled byte-compare kernel counts only ``ts``.
    default_for : tuple of str
        The alphabets whose default model it is.
    """

    name: str
    alphabets: tuple
    formula: str
    source: str
    frequencies: str = "-"
    needs_frequencies: bool = False
    has_gamma: bool = False
    gamma_source: str = ""
    counts: str = "ts"
    default_for: tuple = ()

    @property
    def needs(self) -> str:
        """What the model needs from each pair, in words."""
        return COUNT_LEVELS[self.counts]


_PAIR = "alignment (default) or pair"

REGISTRY = {m.name: m for m in (
    DistanceModel("p", ("dna", "protein"), "d = p (mismatches / compared columns)", "common practice"),
    DistanceModel("jc69", ("dna",), "d = 3/4 L(1 - 4p/3)", "Jukes & Cantor 1969", "equal",
                  has_gamma=True, gamma_source="Jin & Nei 1990"),
    DistanceModel("k80", ("dna",), "d = 1/2 L(1 - 2P - Q) + 1/4 L(1 - 2Q)", "Kimura 1980", "equal",
                  has_gamma=True, gamma_source="Jin & Nei 1990", default_for=("dna",)),
    DistanceModel("f81", ("dna",), "d = B L(1 - p/B), B = 1 - sum pi_i^2",
                  "Felsenstein 1981 model; distance as in Tajima & Nei 1984", _PAIR, needs_frequencies=True,
                  has_gamma=True),
    DistanceModel("tn84", ("dna",),
                  "d = b L(1 - p/b), b = [1 - sum g_i^2 + p^2/h]/2, h = sum_{i<j} x_ij^2 / (2 g_i g_j)",
                  "Tajima & Nei 1984", _PAIR, needs_frequencies=True, counts="full"),
    DistanceModel("t92", ("dna",), "d = h L(1 - P/h - Q) + (1 - h)/2 L(1 - 2Q)", "Tamura 1992",
                  "GC content: alignment, h = 2 theta (1 - theta); pair, h = theta1 + theta2 - 2 theta1 theta2",
                  needs_frequencies=True, has_gamma=True),
    DistanceModel("tn93", ("dna",),
                  "d = 2 pi_A pi_G / pi_R L(1 - pi_R P1 / (2 pi_A pi_G) - Q / (2 pi_R)) + 2 pi_C pi_T / pi_Y "
                  "L(1 - pi_Y P2 / (2 pi_C pi_T) - Q / (2 pi_Y)) + 2 (pi_R pi_Y - pi_A pi_G pi_Y / pi_R - "
                  "pi_C pi_T pi_R / pi_Y) L(1 - Q / (2 pi_R pi_Y))",
                  "Tamura & Nei 1993", _PAIR, needs_frequencies=True, has_gamma=True,
                  gamma_source="Tamura & Nei 1993", counts="tn93"),
    DistanceModel("logdet", ("dna",),
                  "d = -1/4 [ln det F - 1/2 ln det(Pi_x Pi_y)], F the pair's 4 x 4 divergence matrix "
                  "(proportions), Pi_x, Pi_y its row and column sums on a diagonal",
                  "paralinear form: Lake 1994; LogDet: Lockhart et al. 1994", "from F itself", counts="full"),
    DistanceModel("poisson", ("protein",), "d = L(1 - p)", "Zuckerkandl & Pauling 1965; Nei & Kumar 2000",
                  has_gamma=True, gamma_source="Nei & Kumar 2000", default_for=("protein",)),
    DistanceModel("kimura", ("protein",), "d = -ln(1 - p - 0.2 p^2)", "Kimura 1983"),
)}

#: Every model name, in the order help texts list them.
MODEL_NAMES = tuple(REGISTRY)
#: The models of each alphabet (``p`` is in both).
DNA_MODELS = tuple(n for n, m in REGISTRY.items() if "dna" in m.alphabets)
PROTEIN_MODELS = tuple(n for n, m in REGISTRY.items() if "protein" in m.alphabets)
#: Models with a gamma form, and models that take base frequencies.
GAMMA_MODELS = frozenset(n for n, m in REGISTRY.items() if m.has_gamma)
FREQ_MODELS = frozenset(n for n, m in REGISTRY.items() if m.needs_frequencies)
#: alphabet -> its default model.
DEFAULT_MODELS = {a: n for n, m in REGISTRY.items() for a in m.default_for}


def models_for(alphabet: str) -> tuple:
    """The names of the models for ``alphabet`` (``"dna"`` or ``"protein"``).

    Examples
    --------
    >>> models_for("protein")
    ('p', 'poisson', 'kimura')
    """
    return DNA_MODELS if alphabet == "dna" else PROTEIN_MODELS


def get(name: str, alphabet: str | None = None, source: str = "alignment") -> DistanceModel:
    """The entry of model ``name`` (case ignored), checked against ``alphabet`` when given.

    ``source`` names the alignment in the message of a model for the other alphabet.

    Examples
    --------
    >>> get("JC69").has_gamma
    True
    >>> get("nope")
    Traceback (most recent call last):
    ...
    seqdist.core.errors.InputError: unknown model 'nope' (DNA: p, jc69, k80, f81, tn84, t92, tn93, logdet; \
protein: p, poisson, kimura)
    """
    entry = REGISTRY.get(name.lower()) if isinstance(name, str) else None
    if entry is None:
        raise InputError(f"unknown model '{name}' (DNA: {', '.join(DNA_MODELS)}; protein: "
                         f"{', '.join(PROTEIN_MODELS)})")
    if alphabet is not None and alphabet not in entry.alphabets:
        allowed = models_for(alphabet)
        other = "protein" if alphabet == "dna" else "DNA"
        raise InputError(f"{source}: the alignment reads as {_ALPHABET_NAMES[alphabet]}, "
                         f"but model '{entry.name}' is for {other} sequences (choose from {', '.join(allowed)}, "
                         "or force the alphabet with --alphabet)")
    return entry


def model_guide(indent: str = "  ") -> str:
    """The models by alphabet, their defaults and the gamma forms, for ``--help`` texts.

    Examples
    --------
    >>> print(model_guide().splitlines()[1])
      protein  p, poisson, kimura                           (default poisson)
    """
    rows = [(_ALPHABET_NAMES[a], ", ".join(models_for(a)), DEFAULT_MODELS[a]) for a in ("dna", "protein")]
    width = max(len(names) for _, names, _ in rows) + 3
    lines = [f"{indent}{label:<8} {names:<{width}}(default {default})" for label, names, default in rows]
    gammas = ", ".join(n for n in MODEL_NAMES if n in GAMMA_MODELS)
    lines.append(f"{indent}gamma forms (--gamma ALPHA): {gammas}")
    return "\n".join(lines)


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def model_table() -> str:
    """The model table of docs/distances.md (markdown), made from the entries.

    Examples
    --------
    >>> print(model_table().splitlines()[2])
    | `p` | d = p (mismatches / compared columns) | common practice | - | - |
    """
    lines = ["| model | formula | source | base frequencies | gamma |", "| --- | --- | --- | --- | --- |"]
    for m in REGISTRY.values():
        name = f"`{m.name}`" + (" (protein)" if m.alphabets == ("protein",) else "")
        gamma = ("yes" + (f" ({m.gamma_source})" if m.gamma_source else "")) if m.has_gamma else "-"
        lines.append(f"| {name} | {_cell(m.formula)} | {_cell(m.source)} | {_cell(m.frequencies)} | {gamma} |")
    return "\n".join(lines) + "\n"
