"""The labelled distance matrix at the bottom of the package.

A :class:`DistanceMatrix` is a tuple of labels plus a square float64 array
(or float32, asked for explicitly: large matrices stored in single precision).
Missing entries are NaN; a distance of 0 is a real value (identical
sequences). All validation of outside data happens in one place,
:meth:`DistanceMatrix.from_array`, and every failure names the label or pair.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Iterable, Sequence

import numpy as np

from seqdist.core.errors import InputError

if TYPE_CHECKING:  # only for the annotations: pandas is imported where a frame is made
    import pandas as pd
    from numpy.typing import ArrayLike, DTypeLike

__all__ = ["default_tol", "bad_label_char", "DistanceMatrix", "FLOAT32_REL_TOL"]

#: The default tolerance of a float32 matrix, relative to its largest entry: 2**-22, four
#: units of float32 rounding (2**-24 relative). The float64 default, 1e-9, is below what
#: float32 can hold: a triangle that is tight in the real numbers is off by a rounding
#: of about 6e-8 once stored in float32, and would count as violated.
FLOAT32_REL_TOL = 2.0 ** -22


def default_tol(values: np.ndarray) -> float:
    """The contract's default tolerance: 1e-9 times the largest finite entry
    (:data:`FLOAT32_REL_TOL`, 2**-22, times it for a float32 array).

    Examples
    --------
    >>> default_tol(np.array([[0.0, 2.0], [2.0, 0.0]]))
    2e-09
    >>> default_tol(np.array([[0.0, 2.0], [2.0, 0.0]], dtype=np.float32)) == 2 * 2.0 ** -22
    True
    """
    rel = FLOAT32_REL_TOL if getattr(values, "dtype", None) == np.float32 else 1e-9
    if values.size:
        # fmax skips NaN; one pass and no copy of the finite entries (large matrices)
        top = float(np.fmax.reduce(np.abs(values), axis=None))
        if np.isfinite(top):
            return rel * top
    finite = values[np.isfinite(values)]  # an infinite entry (or nothing but NaN): the careful way
    top = float(np.max(np.abs(finite))) if finite.size else 0.0
    return rel * top


def bad_label_char(label: str) -> str | None:
    r"""The first control character of a label (line break, escape, bell...), or None.

    Control characters (Unicode category Cc) and the Unicode line and
    paragraph separators would break line-based files and messages that show
    the label, so labels may not hold them. A tab is the one exception: tsv
    and csv files quote it, Newick quotes it, and the square formats refuse
    white space in labels with their own message.

    Examples
    --------
    >>> bad_label_char("taxon 1"), bad_label_char("a\nb"), bad_label_char("a\tb")
    (None, '\n', None)
    """
    if label.isprintable():  # the common case, fast
        return None
    import unicodedata

    for ch in label:
        if ch != "\t" and unicodedata.category(ch) in ("Cc", "Zl", "Zp"):
            return ch
    return None


def _where(source: str | None) -> str:
    return f"{source}: " if source else ""


@dataclass(frozen=True, eq=False)
class DistanceMatrix:
    """Labels plus a symmetric, zero-diagonal, non-negative float64 array.

    A matrix may hold float32 values instead, when asked for (``dtype`` of
    :meth:`from_array`; a float32 npz file is read that way): half the memory
    for tens of thousands of taxa, about seven significant digits, and a
    default tolerance of 2**-22 times the largest entry
    (:func:`default_tol`). Kernels that can work on float32 do so in place;
    the others widen a copy to float64.

    Build one from outside data with :meth:`from_array`,
    :meth:`from_frame` (alias :meth:`from_pandas`) or :meth:`from_condensed`,
    which validate. The array is read-only; derive new matrices with
    :meth:`with_values`.

    A matrix works where numpy expects an array: ``np.asarray(dm)`` is the
    read-only (n, n) float64 array itself (no copy), ``np.array(dm)`` and
    :meth:`to_numpy` a writable copy; :meth:`condensed` is scipy's condensed
    vector and :meth:`to_frame` (alias :meth:`to_pandas`) a labelled
    DataFrame. docs/python.md shows them with scipy, scikit-learn, Biopython
    and dendropy.

    ``==`` between two matrices is identity, as for any object without a
    value equality (a matrix stays hashable, and the question "equal?" of
    float matrices has more than one right answer); compare contents with
    :meth:`equals` (same labels in the same order, same values, NaN equal to
    NaN) or ``np.allclose(dm, other)`` for values within a tolerance.
    ``dm == array`` is numpy's element-wise comparison, as for any
    array-like.

    Examples
    --------
    >>> dm = DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"])
    >>> dm["a", "b"]
    1.0
    >>> dm.condensed()
    array([1.])
    >>> float(np.asarray(dm).sum()), dm.labels
    (2.0, ('a', 'b'))
    >>> dm == DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"]), dm.equals(dm.with_values(np.array(dm)))
    (False, True)
    """

    labels: tuple
    values: np.ndarray

    # -- construction ----------------------------------------------------
    @classmethod
    def from_array(cls, values: ArrayLike, labels: Sequence[str] | None = None, *, source: str | None = None,
                   col_labels: Sequence[str] | None = None, sym_tol: float | None = None,
                   copy: bool = True, dtype: DTypeLike | None = None) -> "DistanceMatrix":
        """Validate outside data and build a matrix.

        Parameters
        ----------
        values : array_like, shape (n, n)
            Distances; NaN marks a missing entry.
        labels : sequence of str, optional
            Row labels (default: the labels of ``values`` when it is a
            :class:`DistanceMatrix`, else ``t0 .. t{n-1}``).
        source : str, optional
            Where the data came from (a file name), used in error messages.
        col_labels : sequence of str, optional
            Column labels when they were read separately; they must equal
            ``labels``.
        sym_tol : float, optional
            Tolerance for symmetry and the zero diagonal (default: 1e-9 times
            the largest entry, plus a tiny absolute floor). Entries within it
            are averaged to exact symmetry.
        copy : bool, optional
            False: a float64 ``values`` array may be used as it is, not
            copied (its diagonal is set to exactly 0 and the matrix keeps it:
            do not write to it afterwards); for an array made only to build
            this matrix, which saves a copy of a large matrix. Default True.
        dtype : float64 or float32, optional
            The type the values are held in (default float64). float32 halves
            the memory of a large matrix at about seven significant digits.

        Raises
        ------
        InputError
            Not square, labels not unique, empty or holding a control
            character (see :func:`bad_label_char`), rows and columns differ,
            asymmetric, non-zero diagonal, negative or infinite entries.

        Examples
        --------
        >>> DistanceMatrix.from_array([[0, 2], [2, 0]], ["x", "y"]).n
        2
        """
        where = _where(source)
        if labels is None and isinstance(values, DistanceMatrix):
            labels = values.labels  # an array-like that knows its labels keeps them
        kind = np.dtype(np.float64 if dtype is None else dtype)
        if kind not in (np.float64, np.float32):
            raise ValueError(f"a DistanceMatrix holds float64 or float32 values, not {kind}")
        try:
            arr = np.array(values, dtype=kind, copy=True if copy else None)
        except (TypeError, ValueError) as exc:
            raise InputError(f"{where}values are not numeric ({exc})") from None
        if arr.ndim != 2 or arr.shape[0] != arr.shape[1]:
            raise InputError(f"{where}matrix is not square (shape {arr.shape})")
        n = arr.shape[0]
        if n == 0:
            raise InputError(f"{where}matrix is empty")
        if labels is None:
            labels = [f"t{i}" for i in range(n)]
        labels = tuple(str(x) for x in labels)
        if len(labels) != n:
            raise InputError(f"{where}{len(labels)} labels for a {n} x {n} matrix")
        if col_labels is not None:
            col_labels = tuple(str(x) for x in col_labels)
            if len(col_labels) != n:
                raise InputError(f"{where}{len(col_labels)} column labels for {n} rows")
            for i, (r, c) in enumerate(zip(labels, col_labels)):
                if r != c:
                    raise InputError(f"{where}row and column labels differ at position {i + 1}: "
                                     f"row '{r}', column '{c}'")
        seen: dict[str, int] = {}
        for i, lab in enumerate(labels):
            if lab == "":
                raise InputError(f"{where}empty label at position {i + 1}")
            bad = bad_label_char(lab)
            if bad is not None:
                from seqdist.core.console import one_line

                raise InputError(f"{where}label '{one_line(lab)}' at position {i + 1} holds a control character "
                                 f"({one_line(bad)}); labels must be printable text")
            if lab in seen:
                raise InputError(f"{where}duplicate label '{lab}' (positions {seen[lab] + 1} and {i + 1})")
            seen[lab] = i
        if np.isfinite(arr).all():
            return cls._checked_complete(arr, labels, where, sym_tol)
        if np.isinf(arr).any():
            i, j = np.argwhere(np.isinf(arr))[0]
            raise InputError(f"{where}entry ({labels[i]}, {labels[j]}) is infinite; "
                             "write a missing entry (empty cell or NA) instead")
        nan = np.isnan(arr)
        diag = np.diagonal(arr)
        if np.isnan(diag).any():
            i = int(np.flatnonzero(np.isnan(diag))[0])
            raise InputError(f"{where}diagonal entry of '{labels[i]}' is missing; it must be 0")
        if (arr[~nan] < 0).any():
            neg = np.argwhere(np.where(nan, 0.0, arr) < 0)
            i, j = neg[0]
            raise InputError(f"{where}negative entry {float(arr[i, j])!r} at ({labels[i]}, {labels[j]})")
        if sym_tol is None:
            sym_tol = default_tol(arr) + 1e-12
        bad = np.abs(diag) > sym_tol
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"{where}non-zero diagonal entry {float(diag[i])!r} for '{labels[i]}'")
        nan_asym = nan != nan.T
        if nan_asym.any():
            i, j = np.argwhere(nan_asym)[0]
            present = (i, j) if not nan[i, j] else (j, i)
            raise InputError(f"{where}asymmetric: ({labels[present[0]]}, {labels[present[1]]}) = "
                             f"{float(arr[present])!r} but ({labels[present[1]]}, {labels[present[0]]}) is missing")
        diff = np.abs(np.where(nan, 0.0, arr - arr.T))
        if (diff > sym_tol).any():
            i, j = np.unravel_index(int(np.argmax(diff)), diff.shape)
            raise InputError(f"{where}asymmetric: ({labels[i]}, {labels[j]}) = {float(arr[i, j])!r} but "
                             f"({labels[j]}, {labels[i]}) = {float(arr[j, i])!r}")
        if diff.any():
            arr = 0.5 * (arr + arr.T)
        np.fill_diagonal(arr, 0.0)
        return cls._trusted(arr, labels)

    @classmethod
    def _checked_complete(cls, arr: np.ndarray, labels: tuple, where: str, sym_tol: float | None
                          ) -> "DistanceMatrix":
        """The checks of :meth:`from_array` for a matrix without missing or infinite entries.

        The same checks, messages and result in fewer passes over the data and with one
        temporary array, which matters at tens of thousands of taxa.
        """
        if (arr < 0).any():
            i, j = np.argwhere(arr < 0)[0]
            raise InputError(f"{where}negative entry {float(arr[i, j])!r} at ({labels[i]}, {labels[j]})")
        if sym_tol is None:
            rel = FLOAT32_REL_TOL if arr.dtype == np.float32 else 1e-9
            sym_tol = rel * float(arr.max()) + 1e-12  # default_tol of a finite non-negative matrix
        diag = np.diagonal(arr)
        bad = np.abs(diag) > sym_tol
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(f"{where}non-zero diagonal entry {float(diag[i])!r} for '{labels[i]}'")
        # |a - a^T| in blocks of rows: its largest entry and where (the first, in row order)
        n = arr.shape[0]
        step = max(1, min(n, (1 << 22) // n))
        largest, at = 0.0, (0, 0)
        for r0 in range(0, n, step):
            block = np.abs(arr[r0:r0 + step] - arr[:, r0:r0 + step].T)
            k = int(np.argmax(block))
            if block.flat[k] > largest:
                largest, at = float(block.flat[k]), (r0 + k // n, k % n)
        if largest > sym_tol:
            i, j = at
            raise InputError(f"{where}asymmetric: ({labels[i]}, {labels[j]}) = {float(arr[i, j])!r} but "
                             f"({labels[j]}, {labels[i]}) = {float(arr[j, i])!r}")
        if largest > 0:
            arr = 0.5 * (arr + arr.T)
        np.fill_diagonal(arr, 0.0)
        return cls._trusted(arr, labels)

    @classmethod
    def _trusted(cls, arr: np.ndarray, labels: Iterable[str]) -> "DistanceMatrix":
        """Wrap an array already known to be valid (no checks; internal)."""
        # A read-only view: callers hand over the array and must not keep writing to it.
        kind = np.float32 if getattr(arr, "dtype", None) == np.float32 else np.float64
        arr = np.ascontiguousarray(arr, dtype=kind).view(np.ndarray)
        arr.setflags(write=False)
        return cls(tuple(labels), arr)

    @classmethod
    def from_frame(cls, frame: pd.DataFrame, *, source: str | None = None) -> "DistanceMatrix":
        """Build from a pandas DataFrame indexed and columned by label (alias :meth:`from_pandas`).

        The index and the columns must hold the same labels in the same
        order; the values are validated like :meth:`from_array`'s.

        Examples
        --------
        >>> import pandas as pd
        >>> f = pd.DataFrame([[0, 3], [3, 0]], index=["a", "b"], columns=["a", "b"])
        >>> DistanceMatrix.from_frame(f)["b", "a"]
        3.0
        """
        return cls.from_array(frame.to_numpy(dtype=np.float64, na_value=np.nan), list(frame.index),
                              col_labels=list(frame.columns), source=source)

    @classmethod
    def from_pandas(cls, frame: pd.DataFrame, *, source: str | None = None) -> "DistanceMatrix":
        """The same as :meth:`from_frame` (the name pandas users look for).

        Examples
        --------
        >>> import pandas as pd
        >>> f = pd.DataFrame([[0, 3], [3, 0]], index=["a", "b"], columns=["a", "b"])
        >>> DistanceMatrix.from_pandas(f).labels
        ('a', 'b')
        """
        return cls.from_frame(frame, source=source)

    @classmethod
    def from_condensed(cls, vector: ArrayLike, labels: Sequence[str], *,
                       source: str | None = None) -> "DistanceMatrix":
        """Build from the upper triangle read row by row (scipy's condensed form).

        Examples
        --------
        >>> DistanceMatrix.from_condensed([1, 2, 3], ["a", "b", "c"])["b", "c"]
        3.0
        """
        v = np.asarray(vector, dtype=np.float64)
        n = len(labels)
        if v.shape != (n * (n - 1) // 2,):
            raise InputError(f"{_where(source)}condensed vector of length {v.size} does not fit {n} labels")
        arr = np.zeros((n, n))
        iu = np.triu_indices(n, 1)
        arr[iu] = v
        arr[(iu[1], iu[0])] = v
        return cls.from_array(arr, labels, source=source)

    # -- views -----------------------------------------------------------
    @property
    def n(self) -> int:
        return len(self.labels)

    def __len__(self) -> int:
        return self.n

    def __repr__(self) -> str:
        return f"DistanceMatrix(n={self.n}, missing={self.missing_count()})"

    def index(self, label: str) -> int:
        """Position of a label (raises :class:`InputError` when absent)."""
        try:
            return self._index_map()[label]
        except KeyError:
            raise InputError(f"unknown label '{label}'") from None

    def _index_map(self) -> dict[str, int]:
        cache = self.__dict__.get("_idx")
        if cache is None:
            cache = {lab: i for i, lab in enumerate(self.labels)}
            object.__setattr__(self, "_idx", cache)
        return cache

    def __getitem__(self, pair: tuple[str, str]) -> float:
        a, b = pair
        return float(self.values[self.index(a), self.index(b)])

    def missing_mask(self) -> np.ndarray:
        """Boolean (n, n) array, True where the entry is missing."""
        return np.isnan(self.values)

    def missing_count(self) -> int:
        """Number of missing unordered pairs."""
        return int(np.isnan(self.values).sum() // 2)

    @property
    def has_missing(self) -> bool:
        return bool(np.isnan(self.values).any())

    def condensed(self) -> np.ndarray:
        """The upper triangle row by row: scipy's condensed distance vector (a new array).

        ``scipy.spatial.distance.squareform`` and
        ``scipy.cluster.hierarchy.linkage`` take it; the labels are
        :attr:`labels` in the same order.

        Raises
        ------
        InputError
            The matrix has missing entries: scipy's condensed form cannot hold
            them (linkage would refuse NaN or build a meaningless tree), so they
            must be filled first (``seqdist.repair.repair`` fills them) or left
            out with :meth:`subset`.

        Examples
        --------
        >>> from scipy.spatial.distance import squareform
        >>> dm = DistanceMatrix.from_array([[0, 1, 2], [1, 0, 3], [2, 3, 0]], ["a", "b", "c"])
        >>> dm.condensed().tolist(), bool((squareform(dm.condensed()) == np.asarray(dm)).all())
        ([1.0, 2.0, 3.0], True)
        """
        if self.has_missing:
            i, j = np.argwhere(np.isnan(self.values))[0]
            raise InputError(f"the matrix has {self.missing_count()} missing entries (first: "
                             f"({self.labels[min(i, j)]}, {self.labels[max(i, j)]})); scipy's condensed form "
                             "cannot hold them: fill them first (seqdist.repair.repair fills them) or take a "
                             "subset without them")
        return self.values[np.triu_indices(self.n, 1)].copy()

    def __array__(self, dtype: DTypeLike | None = None, copy: bool | None = None) -> np.ndarray:
        """The values for numpy (``np.asarray(dm)``, ``np.array(dm)``), following numpy 2's protocol.

        ``copy=None`` (``np.asarray``) returns the read-only array itself
        when no conversion is needed; ``copy=True`` (``np.array``) a new
        writable array; ``copy=False`` never copies and raises ``ValueError``
        when a ``dtype`` other than float64 would need one. Missing entries
        are NaN.

        Examples
        --------
        >>> dm = DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"])
        >>> np.asarray(dm) is dm.values, np.array(dm).flags.writeable
        (True, True)
        """
        if dtype is not None and np.dtype(dtype) != self.values.dtype:
            if copy is False:
                raise ValueError(f"this DistanceMatrix holds {self.values.dtype} values; {np.dtype(dtype)} needs a "
                                 "copy, "
                                 "and copy=False was asked")
            return self.values.astype(dtype)
        if copy:
            return self.values.copy()
        return self.values

    def to_numpy(self, dtype: DTypeLike | None = None, copy: bool = True) -> np.ndarray:
        """The (n, n) values as a numpy array: a writable copy unless ``copy=False``.

        With ``copy=False`` (and float64) the read-only array itself is
        returned, using no memory; missing entries are NaN.

        Examples
        --------
        >>> dm = DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"])
        >>> a = dm.to_numpy()
        >>> a[0, 1] = 5.0  # a copy: the matrix is unchanged
        >>> dm["a", "b"], dm.to_numpy(copy=False).flags.writeable
        (1.0, False)
        """
        return self.__array__(dtype, copy=True if copy else None)

    def to_frame(self) -> pd.DataFrame:
        """A pandas DataFrame with the labels as index and columns (alias :meth:`to_pandas`).

        Examples
        --------
        >>> float(DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"]).to_frame().loc["a", "b"])
        1.0
        """
        import pandas as pd

        return pd.DataFrame(np.array(self.values), index=list(self.labels), columns=list(self.labels))

    def to_pandas(self) -> pd.DataFrame:
        """The same as :meth:`to_frame` (the name pandas users look for).

        Examples
        --------
        >>> DistanceMatrix.from_array([[0, 1], [1, 0]], ["a", "b"]).to_pandas().shape
        (2, 2)
        """
        return self.to_frame()

    def with_values(self, values: np.ndarray) -> "DistanceMatrix":
        """Same labels, new values (validated like outside data; float32 values of a
        float32 matrix stay float32)."""
        keep = self.values.dtype == np.float32 and getattr(values, "dtype", None) == np.float32
        return DistanceMatrix.from_array(values, self.labels, dtype=np.float32 if keep else None)

    def subset(self, labels: Sequence[str]) -> "DistanceMatrix":
        """The sub-matrix over the given labels, in that order."""
        idx = np.array([self.index(lab) for lab in labels], dtype=np.intp)
        return DistanceMatrix._trusted(self.values[np.ix_(idx, idx)], labels)

    def equals(self, other: "DistanceMatrix") -> bool:
        """Same labels in the same order and the same values (NaN equal to NaN)."""
        return self.labels == other.labels and np.array_equal(self.values, other.values, equal_nan=True)
