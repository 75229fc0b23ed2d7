"""The engine's substep runner (``pqflow.simulation.engine.run_substeps``): it owns the loop and
every draw of the non-Gaussian parts' schemes, so its draw contract is what keeps credit and
Heston paths reproducible. Checked against numpy's documented Generator semantics (a C-order
draw of a larger shape gives the same stream of numbers as consecutive smaller draws) and the
common-practice definition of antithetic pairs (paths ``2j`` and ``2j+1`` get ``z`` and ``-z``)."""

from __future__ import annotations

import numpy as np
import pytest

from pqflow.simulation.engine import SubstepScheme, run_substeps


class _Recorder:
    """A scheme that only records what it is handed."""

    def __init__(self, rows: int) -> None:
        self.rows = rows
        self.seen: list[np.ndarray] = []
        self.calls: list[tuple[str, int, int, float]] = []

    def begin_step(self, k: int, h: float, block: np.ndarray) -> None:
        self.calls.append(("begin", k, block.shape[0], h))

    def substep(self, k: int, j: int, h: float, z: np.ndarray) -> None:
        self.seen.append(z.copy())
        self.calls.append(("substep", k, j, h))

    def end_step(self, k: int) -> None:
        self.calls.append(("end", k, -1, 0.0))


TIMES = np.array([0.0, 0.5, 1.5, 3.0])


def test_the_draws_are_one_c_order_draw_and_the_loop_visits_every_substep():
    scheme = _Recorder(rows=3)
    assert isinstance(scheme, SubstepScheme)
    run_substeps(scheme, TIMES, 4, np.random.default_rng(11), n_paths=5)
    # numpy: consecutive draws of (4, 3, 5) continue one stream, the same numbers as one draw
    # of (12, 3, 5) in C order.
    whole = np.random.default_rng(11).standard_normal((12, 3, 5))
    np.testing.assert_array_equal(np.stack(scheme.seen), whole)
    steps = [c for c in scheme.calls if c[0] == "substep"]
    assert [(k, j) for _, k, j, _ in steps] == [(k, j) for k in range(3) for j in range(4)]
    hs = {k: h for _, k, _, h in steps}
    assert hs == pytest.approx({0: 0.125, 1: 0.25, 2: 0.375}, rel=0, abs=1e-15)
    assert [c[0] for c in scheme.calls[:6]] == ["begin", "substep", "substep", "substep", "substep", "end"]


def test_given_numbers_equal_the_generator_and_antithetic_pairs_mirror():
    a, b = _Recorder(rows=2), _Recorder(rows=2)
    run_substeps(a, TIMES, 2, np.random.default_rng(3), n_paths=4)
    run_substeps(b, TIMES, 2, np.random.default_rng(3).standard_normal((6, 2, 4)), n_paths=4)
    np.testing.assert_array_equal(np.stack(a.seen), np.stack(b.seen))
    anti = _Recorder(rows=2)
    run_substeps(anti, TIMES, 2, np.random.default_rng(3), n_paths=4, antithetic=True)
    z = np.stack(anti.seen)  # (6, 2, 4): half as many numbers drawn, partners mirrored
    np.testing.assert_array_equal(z[:, :, 0::2], np.random.default_rng(3).standard_normal((6, 2, 2)))
    np.testing.assert_array_equal(z[:, :, 1::2], -z[:, :, 0::2])


def test_bad_inputs_are_refused():
    # Common practice: a clear error for numbers of the wrong shape and for odd antithetic paths.
    with pytest.raises(ValueError, match=r"n_steps \* substeps, rows, n_paths"):
        run_substeps(_Recorder(rows=2), TIMES, 2, np.zeros((5, 2, 4)), n_paths=4)
    with pytest.raises(ValueError, match="even number of paths"):
        run_substeps(_Recorder(rows=2), TIMES, 2, np.random.default_rng(1), n_paths=3, antithetic=True)
