"""Correlation checks and Higham's nearest correlation matrix."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import minimize

from pqflow.errors import MarketDataError
from pqflow.market.correlation import check_correlation_matrix, nearest_correlation_matrix

HIGHAM_A = np.array([[1.0, 1.0, 0.0], [1.0, 1.0, 1.0], [0.0, 1.0, 1.0]])


def _nearest_by_scipy(a: np.ndarray, seeds: int = 4) -> float:
    """Independent reference: minimise ||L L^T - A||_F over L with unit-norm rows (every
    correlation matrix is such a Gram matrix) with scipy.optimize (BFGS), best of a few starts."""
    n = a.shape[0]

    def gram(x):
        rows = x.reshape(n, n)
        rows = rows / np.linalg.norm(rows, axis=1, keepdims=True)
        return rows @ rows.T

    rng = np.random.default_rng(20020101)
    best = np.inf
    for _ in range(seeds):
        res = minimize(
            lambda x: np.sum((gram(x) - a) ** 2),
            rng.standard_normal(n * n),
            method="BFGS",
            options={"gtol": 1e-12},
        )
        best = min(best, float(np.sqrt(res.fun)))
    return best


def test_higham_example_as_printed():
    repair = nearest_correlation_matrix(HIGHAM_A)
    x = repair.matrix
    # Higham, IMA J. Numer. Anal. 22 (2002), the 3x3 example: off-diagonals 0.7607 and 0.1573
    # (four decimals as printed).
    assert x[0, 1] == pytest.approx(0.7607, abs=5e-5)
    assert x[1, 2] == pytest.approx(0.7607, abs=5e-5)
    assert x[0, 2] == pytest.approx(0.1573, abs=5e-5)
    np.testing.assert_array_equal(np.diag(x), 1.0)
    assert repair.changed and repair.iterations > 0
    assert repair.frobenius_distance == pytest.approx(np.linalg.norm(x - HIGHAM_A), abs=1e-15)
    # The repaired matrix passes the check (PSD within tolerance).
    check_correlation_matrix(x)
    assert repair.min_eigenvalue_output > -1e-12
    assert repair.min_eigenvalue_input == pytest.approx(
        1.0 - np.sqrt(2.0), abs=1e-12
    )  # eigenvalues of A: 1, 1 +- sqrt 2


def test_distance_matches_an_independent_optimiser():
    # scipy.optimize over Gram-matrix parametrisations finds the same minimum distance.
    a = np.array(
        [
            [1.0, 0.9, 0.7, -0.6],
            [0.9, 1.0, 0.95, -0.2],
            [0.7, 0.95, 1.0, 0.5],
            [-0.6, -0.2, 0.5, 1.0],
        ]
    )
    repair = nearest_correlation_matrix(a)
    assert repair.changed
    reference = _nearest_by_scipy(a)
    assert repair.frobenius_distance == pytest.approx(reference, abs=1e-6)
    assert _nearest_by_scipy(HIGHAM_A) == pytest.approx(
        nearest_correlation_matrix(HIGHAM_A).frobenius_distance, abs=1e-6
    )


def test_valid_matrix_is_returned_unchanged():
    a = np.array([[1.0, 0.3, -0.2], [0.3, 1.0, 0.4], [-0.2, 0.4, 1.0]])
    repair = nearest_correlation_matrix(a)
    # A valid correlation matrix is its own nearest one (distance 0, by definition).
    np.testing.assert_array_equal(repair.matrix, a)
    assert repair.frobenius_distance == 0.0 and not repair.changed and repair.iterations == 0


NAMES = ["rates", "equity", "credit"]


@pytest.mark.parametrize(
    "matrix, pieces",
    [
        # hand-made faulty matrices; the position of the fault is known by construction
        (np.ones((2, 3)), ["must be square", "(2, 3)"]),
        (
            np.array([[1.0, 0.3, 0.0], [0.3, 1.0, 0.2], [0.0, 0.2000001, 1.0]]),
            ["not symmetric", "row 3 ('credit'), column 2 ('equity')"],
        ),
        (
            np.array([[1.0, 0.3, 0.0], [0.3, 0.98, 0.2], [0.0, 0.2, 1.0]]),
            ["diagonal", "row 2 ('equity'), column 2 ('equity')"],
        ),
        (
            np.array([[1.0, 1.2, 0.0], [1.2, 1.0, 0.2], [0.0, 0.2, 1.0]]),
            ["outside [-1, 1]", "row 1 ('rates'), column 2 ('equity')"],
        ),
        (
            np.array([[1.0, 0.3, np.nan], [0.3, 1.0, 0.2], [np.nan, 0.2, 1.0]]),
            ["not a finite number", "row 1 ('rates'), column 3 ('credit')"],
        ),
        (HIGHAM_A, ["not positive semi-definite", "first 3 drivers", "'credit'"]),
    ],
)
def test_check_names_problem_and_position(matrix, pieces):
    with pytest.raises(MarketDataError) as err:
        check_correlation_matrix(
            matrix, names=NAMES if np.shape(matrix) == (3, 3) else None, source="corr.csv"
        )
    message = str(err.value)
    assert "corr.csv" in message
    for piece in pieces:
        assert piece in message


def test_psd_failure_names_the_shortest_inconsistent_block():
    # Drivers 1-3 are consistent; adding the 4th (correlated +0.9 with 1 and 2, -0.9 with 3 where
    # 1-3 are mutually +0.8) breaks positive semi-definiteness: the message points at driver 4.
    a = np.array(
        [
            [1.0, 0.8, 0.8, 0.9],
            [0.8, 1.0, 0.8, 0.9],
            [0.8, 0.8, 1.0, -0.9],
            [0.9, 0.9, -0.9, 1.0],
        ]
    )
    assert np.linalg.eigvalsh(a[:3, :3])[0] > 0 and np.linalg.eigvalsh(a)[0] < 0
    with pytest.raises(MarketDataError, match=r"first 4 drivers \(rows/columns 1 to 4\)"):
        check_correlation_matrix(a)
