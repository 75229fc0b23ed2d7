"""Exposures of a state variable to a Brownian driver, and the integrals that give exact
Gaussian step laws.

Every state of the Gaussian models here moves over a step ``[t0, t1]`` by a deterministic part
plus noise of the form ``e_i = sum_k int_{t0}^{t1} c_ik(s) g_ik(t1 - s) dW_k(s)``: a piecewise-
constant coefficient ``c`` (a volatility) times one of three kernels of the time to the step's
end ``u = t1 - s``,

    "exp":  e^{-k u}            (a mean-reverting factor at the step's end),
    "b":    B_k(u) = (1 - e^{-k u}) / k   (the time integral of such a factor),
    "one":  1                   (a log index driven by its own volatility).

By the Ito isometry ``Cov(e_i, e_j) = sum_{k,l} rho_kl int c_ik c_jl g_ik g_jl ds`` and, under a
measure whose drivers are shifted by ``dW^Q = dW^P + lambda dt`` (Girsanov), the mean of ``e_i``
moves by ``sum_k int c_ik lambda_k g_ik ds``. On each piece where every coefficient and price
of risk is constant these integrals are closed forms in ``u`` (the stable series of
:mod:`pqflow.models.g2pp` for small arguments). The kernels and their integrals are those of
Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006, ch. 3.3 and 4.2.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from pqflow.models.g2pp import b_b_integral, exp_b_integral
from pqflow.models.hull_white import b_factor, phi2
from pqflow.models.schedule import PiecewiseConstant, as_schedule

__all__ = ["Exposure", "Pieces", "grid_pieces", "single_integral", "pair_integral", "grid_moments"]

_KINDS = ("exp", "b", "one")


@dataclass(frozen=True, kw_only=True)
class Exposure:
    """``scale(s) * kernel(t1 - s) dW_driver(s)``: one state's loading on one driver."""

    driver: str
    kind: str
    rate: float = 0.0
    scale: PiecewiseConstant | float = 1.0

    def __post_init__(self) -> None:
        if self.kind not in _KINDS:
            raise ValueError(f"kernel kind must be one of {_KINDS}, not {self.kind!r}")
        if self.kind != "one" and not self.rate > 0.0:
            raise ValueError("an 'exp' or 'b' kernel needs a positive rate")
        object.__setattr__(self, "scale", as_schedule(self.scale))


def single_integral(e: Exposure, u: np.ndarray) -> np.ndarray:
    """``int_0^u g(v) dv`` of the exposure's kernel."""
    if e.kind == "exp":
        return b_factor(e.rate, u)
    if e.kind == "b":
        return phi2(e.rate, u)
    return np.asarray(u, dtype=float)


def pair_integral(e: Exposure, f: Exposure, u: np.ndarray) -> np.ndarray:
    """``int_0^u g_e(v) g_f(v) dv`` of two kernels."""
    u = np.asarray(u, dtype=float)
    kinds = (e.kind, f.kind)
    if kinds == ("one", "one"):
        return u
    if "one" in kinds:
        return single_integral(e if f.kind == "one" else f, u)
    if kinds == ("exp", "exp"):
        return b_factor(e.rate + f.rate, u)
    if kinds == ("b", "b"):
        return b_b_integral(e.rate, f.rate, u)
    ex, bb = (e, f) if e.kind == "exp" else (f, e)
    return exp_b_integral(ex.rate, bb.rate, u)


@dataclass(frozen=True, kw_only=True)
class Pieces:
    """The pieces of every step of a grid on which given schedules are constant.

    step: index ``k`` of the step each piece lies in, ``(P,)``; start, end: the piece in calendar
    time, ``(P,)``; u_hi, u_lo: time from the piece's start and end to the end of its step.
    """

    step: np.ndarray
    start: np.ndarray
    end: np.ndarray
    u_hi: np.ndarray
    u_lo: np.ndarray

    @property
    def length(self) -> np.ndarray:
        return self.end - self.start

    def values(self, schedule: PiecewiseConstant) -> np.ndarray:
        """The schedule's value on each piece, ``(P,)``."""
        return np.asarray(schedule(0.5 * (self.start + self.end)), dtype=float)

    def per_step(self, weights: np.ndarray, n_steps: int) -> np.ndarray:
        """Sum of ``weights`` ``(P,)`` over the pieces of each step, ``(n_steps,)``."""
        return np.bincount(self.step, weights=weights, minlength=n_steps)


def grid_pieces(times: np.ndarray, *schedules: PiecewiseConstant) -> Pieces:
    """Cut each step ``[times[k], times[k+1]]`` at every knot of ``schedules``."""
    times = np.asarray(times, dtype=float)
    knots = [k for sched in schedules for k in sched.knots if times[0] < k < times[-1]]
    edges = np.unique(np.concatenate([times, np.asarray(knots, dtype=float)]))
    start, end = edges[:-1], edges[1:]
    step = np.searchsorted(times, start, side="right") - 1
    step_end = times[step + 1]
    return Pieces(step=step, start=start, end=end, u_hi=step_end - start, u_lo=step_end - end)


def grid_moments(
    times: np.ndarray,
    exposures: Sequence[Sequence[Exposure]],
    correlation: np.ndarray,
    drivers: Sequence[str],
    prices_of_risk: Mapping[str, float | PiecewiseConstant],  # each read through as_schedule
) -> tuple[np.ndarray, np.ndarray]:
    """Covariance ``(K, d, d)`` of the step noise of ``d`` states over each of the ``K`` steps of
    ``times``, and the shift of its mean ``(K, d)`` under the real-world measure.

    exposures[i]: the loadings of state ``i``; correlation: of ``drivers`` (in that order);
    prices_of_risk: by driver (a missing driver has none).
    """
    times = np.asarray(times, dtype=float)
    n_steps = times.size - 1
    index = {name: k for k, name in enumerate(drivers)}
    flat = [(i, e) for i, row in enumerate(exposures) for e in row]
    lam = {name: as_schedule(prices_of_risk[name]) for name in drivers if name in prices_of_risk}
    # Exposure.scale is a schedule after __post_init__; as_schedule returns it unchanged (and types it)
    pieces = grid_pieces(times, *(as_schedule(e.scale) for _, e in flat), *lam.values())
    scale = [pieces.values(as_schedule(e.scale)) for _, e in flat]
    lam_values = {name: pieces.values(sched) for name, sched in lam.items()}
    d = len(exposures)
    cov = np.zeros((n_steps, d, d))
    shift = np.zeros((n_steps, d))
    for a, (i, e) in enumerate(flat):
        if e.driver in lam_values:
            inc = single_integral(e, pieces.u_hi) - single_integral(e, pieces.u_lo)
            shift[:, i] += pieces.per_step(scale[a] * lam_values[e.driver] * inc, n_steps)
        for b in range(a, len(flat)):
            j, f = flat[b]
            rho = correlation[index[e.driver], index[f.driver]]
            if rho == 0.0:
                continue
            inc = pair_integral(e, f, pieces.u_hi) - pair_integral(e, f, pieces.u_lo)
            c = rho * pieces.per_step(scale[a] * scale[b] * inc, n_steps)
            if a == b:
                cov[:, i, i] += c
            else:
                cov[:, i, j] += c
                cov[:, j, i] += c
    return cov, shift
