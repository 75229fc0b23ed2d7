"""Correlation matrices: check one, or repair it to the nearest valid one.

A correlation matrix must be square, symmetric, have a unit diagonal and entries in
``[-1, 1]``, and be positive semi-definite (PSD). :func:`check_correlation_matrix` raises
:class:`pqflow.errors.MarketDataError` naming the first problem and where it is.

:func:`nearest_correlation_matrix` is Higham's alternating projections method with Dykstra's
correction (N. J. Higham, "Computing the nearest correlation matrix - a problem from finance",
*IMA J. Numer. Anal.* 22 (2002) 329-343, Algorithm 3.3, unweighted Frobenius norm):

    Delta S_0 = 0, Y_0 = A;  for k = 1, 2, ...:
        R_k = Y_{k-1} - Delta S_{k-1}      (Dykstra's correction)
        X_k = P_S(R_k)                     (project onto the PSD cone: clip eigenvalues at 0)
        Delta S_k = X_k - R_k
        Y_k = P_U(X_k)                     (project onto unit-diagonal matrices)

until the relative changes of ``X`` and ``Y`` and the relative gap ``||X - Y||`` fall below the
tolerance. The limit is the nearest correlation matrix in the Frobenius norm. The final iterate
is made PSD to rounding by clipping its eigenvalues at zero and rescaling to a unit diagonal
(a change of the order of the tolerance).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from pqflow.errors import MarketDataError

__all__ = [
    "check_correlation_matrix",
    "CorrelationRepair",
    "nearest_correlation_matrix",
]


def _where(source: str | None) -> str:
    return f" in {source}" if source else ""


def _label(i: int, names: Sequence[str] | None) -> str:
    return f"{i + 1} ({names[i]!r})" if names is not None else f"{i + 1}"


def _as_square(matrix: np.ndarray, names: Sequence[str] | None, source: str | None) -> np.ndarray:
    a = np.array(matrix, dtype=float)
    if a.ndim != 2 or a.shape[0] != a.shape[1] or a.shape[0] == 0:
        raise MarketDataError(
            f"correlation matrix{_where(source)} must be square; got shape {a.shape}"
        )
    if names is not None and len(names) != a.shape[0]:
        raise MarketDataError(
            f"correlation matrix{_where(source)} has {a.shape[0]} rows but "
            f"{len(names)} driver names"
        )
    bad = ~np.isfinite(a)
    if np.any(bad):
        i, j = np.argwhere(bad)[0]
        raise MarketDataError(
            f"correlation matrix{_where(source)}: entry at row {_label(i, names)}, column "
            f"{_label(j, names)} is not a finite number ({a[i, j]})"
        )
    return a


def check_correlation_matrix(
    matrix: np.ndarray,
    *,
    names: Sequence[str] | None = None,
    source: str | None = None,
    symmetry_tolerance: float = 1e-12,
    diagonal_tolerance: float = 1e-12,
    psd_tolerance: float = 1e-10,
) -> np.ndarray:
    """Return ``matrix`` ``(n, n)`` as a float array if it is a valid correlation matrix.

    Raises :class:`MarketDataError` naming the problem and the row and column (1-based, with
    the driver name when ``names`` is given): not square, a non-finite entry, an entry outside
    ``[-1, 1]``, asymmetry beyond ``symmetry_tolerance``, a diagonal entry not 1, or an
    eigenvalue below ``-psd_tolerance``. For the last, the message names the shortest leading
    block (drivers ``1 .. k``) that is already not PSD.
    source: where the matrix came from (a file name), for the message.
    """
    a = _as_square(matrix, names, source)
    where = _where(source)
    outside = np.abs(a) > 1.0 + diagonal_tolerance
    if np.any(outside):
        i, j = np.argwhere(outside)[0]
        raise MarketDataError(
            f"correlation matrix{where}: entry at row {_label(i, names)}, column "
            f"{_label(j, names)} is {a[i, j]:.6g}, outside [-1, 1]"
        )
    asym = np.abs(a - a.T)
    if np.max(asym) > symmetry_tolerance:
        ii, jj = np.unravel_index(int(np.argmax(asym)), a.shape)
        i, j = (int(ii), int(jj)) if ii > jj else (int(jj), int(ii))
        raise MarketDataError(
            f"correlation matrix{where} is not symmetric: row {_label(i, names)}, column "
            f"{_label(j, names)} is {a[i, j]:.12g} but row {_label(j, names)}, column "
            f"{_label(i, names)} is {a[j, i]:.12g}"
        )
    diag_off = np.abs(np.diag(a) - 1.0) > diagonal_tolerance
    if np.any(diag_off):
        i = int(np.argmax(diag_off))
        raise MarketDataError(
            f"correlation matrix{where}: diagonal entry at row {_label(i, names)}, column "
            f"{_label(i, names)} is {a[i, i]:.12g}, not 1"
        )
    sym = 0.5 * (a + a.T)
    lowest = float(np.linalg.eigvalsh(sym)[0])
    if lowest < -psd_tolerance:
        k = next(
            k
            for k in range(2, a.shape[0] + 1)
            if np.linalg.eigvalsh(sym[:k, :k])[0] < -psd_tolerance
        )
        raise MarketDataError(
            f"correlation matrix{where} is not positive semi-definite (smallest eigenvalue "
            f"{lowest:.3g}); the first {k} drivers (rows/columns 1 to {_label(k - 1, names)}) are "
            "already inconsistent. Fix the inputs or repair the matrix with "
            "nearest_correlation_matrix (Higham 2002) and report the repair."
        )
    return a


@dataclass(frozen=True, kw_only=True)
class CorrelationRepair:
    """Result of :func:`nearest_correlation_matrix`.

    matrix: the nearest correlation matrix, ``(n, n)``.
    frobenius_distance: ``||matrix - input||_F``.
    iterations: alternating-projection steps taken (0 when the input was already valid).
    changed: whether the input needed repair.
    min_eigenvalue_input, min_eigenvalue_output: smallest eigenvalues before and after.
    """

    matrix: np.ndarray
    frobenius_distance: float
    iterations: int
    changed: bool
    min_eigenvalue_input: float
    min_eigenvalue_output: float


def _project_psd(a: np.ndarray) -> np.ndarray:
    w, v = np.linalg.eigh(a)
    out = (v * np.maximum(w, 0.0)) @ v.T
    return 0.5 * (out + out.T)


def nearest_correlation_matrix(
    matrix: np.ndarray,
    *,
    names: Sequence[str] | None = None,
    source: str | None = None,
    tolerance: float = 1e-12,
    max_iterations: int = 10_000,
    psd_tolerance: float = 1e-10,
) -> CorrelationRepair:
    """Nearest correlation matrix to a symmetric ``matrix`` ``(n, n)`` in the Frobenius norm.

    A matrix that already passes :func:`check_correlation_matrix` (with ``psd_tolerance``) is
    returned unchanged with distance 0. Otherwise Higham's (2002) alternating projections with
    Dykstra's correction run until the relative changes are below ``tolerance``; not converging
    within ``max_iterations`` is an error.
    """
    a = _as_square(matrix, names, source)
    if np.max(np.abs(a - a.T)) > 1e-12 * max(1.0, float(np.max(np.abs(a)))):
        i, j = np.unravel_index(int(np.argmax(np.abs(a - a.T))), a.shape)
        raise MarketDataError(
            f"correlation matrix{_where(source)} to repair must be symmetric: row "
            f"{_label(int(i), names)}, column {_label(int(j), names)} differs from its mirror"
        )
    a = 0.5 * (a + a.T)
    lowest_in = float(np.linalg.eigvalsh(a)[0])
    try:
        check_correlation_matrix(a, names=names, source=source, psd_tolerance=psd_tolerance)
    except MarketDataError:
        pass
    else:
        return CorrelationRepair(
            matrix=np.array(matrix, dtype=float),
            frobenius_distance=0.0,
            iterations=0,
            changed=False,
            min_eigenvalue_input=lowest_in,
            min_eigenvalue_output=lowest_in,
        )

    y = a.copy()
    x = a.copy()
    ds = np.zeros_like(a)
    it = 0
    for it in range(1, max_iterations + 1):  # noqa: B007 (it is reported)
        r = y - ds
        x_new = _project_psd(r)
        ds = x_new - r
        y_new = x_new.copy()
        np.fill_diagonal(y_new, 1.0)
        norm_y = np.linalg.norm(y_new)
        change = max(
            np.linalg.norm(x_new - x) / np.linalg.norm(x_new),
            np.linalg.norm(y_new - y) / norm_y,
            np.linalg.norm(y_new - x_new) / norm_y,
        )
        x, y = x_new, y_new
        if change <= tolerance:
            break
    else:
        raise MarketDataError(
            f"nearest correlation matrix{_where(source)} did not converge in {max_iterations} "
            "iterations"
        )
    fixed = _project_psd(y)
    d = np.sqrt(np.diag(fixed))
    fixed = fixed / np.outer(d, d)
    fixed = 0.5 * (fixed + fixed.T)
    np.fill_diagonal(fixed, 1.0)
    return CorrelationRepair(
        matrix=fixed,
        frobenius_distance=float(np.linalg.norm(fixed - a)),
        iterations=it,
        changed=True,
        min_eigenvalue_input=lowest_in,
        min_eigenvalue_output=float(np.linalg.eigvalsh(fixed)[0]),
    )
