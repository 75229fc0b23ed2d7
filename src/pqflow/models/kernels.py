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
from pqflow.models.schedule import PiecewiseConstant, as_schedule, segments

__all__ = ["Exposure", "single_integral", "pair_integral", "step_moments"]

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


def step_moments(
    t0: float,
    t1: float,
    exposures: Sequence[Sequence[Exposure]],
    correlation: np.ndarray,
    drivers: Sequence[str],
    prices_of_risk: Mapping[str, PiecewiseConstant],
) -> tuple[np.ndarray, np.ndarray]:
    """Covariance ``(d, d)`` of the step noise of ``d`` states and the shift of its mean ``(d,)``
    under the real-world measure, over ``[t0, t1]``.

    exposures[i]: the loadings of state ``i``; correlation: of ``drivers`` (in that order);
    prices_of_risk: by driver (a missing driver has none).
    """
    index = {name: k for k, name in enumerate(drivers)}
    flat = [(i, e) for i, row in enumerate(exposures) for e in row]
    lam = {name: as_schedule(prices_of_risk[name]) for name in drivers if name in prices_of_risk}
    schedules = [e.scale for _, e in flat] + list(lam.values())
    pieces = segments(t0, t1, *schedules)
    s0 = np.array([p[0] for p in pieces])
    s1 = np.array([p[1] for p in pieces])
    values = np.array([p[2] for p in pieces]).reshape(len(pieces), len(schedules))
    u_hi, u_lo = t1 - s0, t1 - s1
    scale = values[:, : len(flat)]  # (pieces, exposures)
    lam_values = dict(zip(lam, values[:, len(flat):].T))
    d = len(exposures)
    cov = np.zeros((d, d))
    shift = np.zeros(d)
    for a, (i, e) in enumerate(flat):
        if e.driver in lam_values:
            inc = single_integral(e, u_hi) - single_integral(e, u_lo)
            shift[i] += float(np.sum(scale[:, a] * lam_values[e.driver] * inc))
        for b in range(a, len(flat)):
            j, f = flat[b]
            rho = correlation[index[e.driver], index[f.driver]]
            if rho == 0.0:
                continue
            inc = pair_integral(e, f, u_hi) - pair_integral(e, f, u_lo)
            c = rho * float(np.sum(scale[:, a] * scale[:, b] * inc))
            if a == b:
                cov[i, i] += c
            else:
                cov[i, j] += c
                cov[j, i] += c
    return cov, shift
