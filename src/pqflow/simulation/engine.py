"""The batch engine: exact transitions on the output grid, under either measure.

For each step the model gives the exact law ``s_1 = F s_0 + c + e`` (``pqflow.models.base``).
The engine draws standard normals ``z`` of shape ``(n_paths, n_steps, d)``, sets ``e = L z``
(plus the real-world mean shift ``m`` in the real-world set), runs the recursion and turns the
states into columns. The same ``z`` give the density weights (``pqflow.measure.density``), and
the deflator is the density over the cash account (real world) or one over the cash account
(market consistent).
"""

from __future__ import annotations

import numpy as np

from pqflow.measure.density import density_coefficients, log_density_increments
from pqflow.models.base import ScenarioModel

__all__ = ["MEASURES", "time_grid", "simulate_batch"]

MEASURES = ("real_world", "market_consistent")
DENSITY_COLUMN = {"real_world": "q_density", "market_consistent": "p_density"}


def time_grid(horizon_years: float, steps_per_year: int) -> np.ndarray:
    """Output times ``k / steps_per_year``, ``k = 0 .. horizon * steps_per_year``."""
    n = int(round(horizon_years * steps_per_year))
    return np.arange(n + 1, dtype=float) / steps_per_year


def _draw(rng: np.random.Generator, n_paths: int, n_steps: int, d: int, antithetic: bool) -> np.ndarray:
    if not antithetic:
        return rng.standard_normal((n_paths, n_steps, d))
    if n_paths % 2:
        raise ValueError("antithetic sampling needs an even number of paths")
    half = rng.standard_normal((n_paths // 2, n_steps, d))
    z = np.empty((n_paths, n_steps, d))
    z[0::2] = half
    np.negative(half, out=z[1::2])
    return z


def simulate_batch(
    model: ScenarioModel,
    times: np.ndarray,
    *,
    measure: str,
    n_paths: int,
    rng: np.random.Generator,
    antithetic: bool,
) -> dict[str, np.ndarray]:
    """Simulate ``n_paths`` paths on ``times`` under ``measure``.

    Returns the model's columns plus ``deflator`` and the density column (``q_density`` =
    dQ/dP in the real-world set, ``p_density`` = dP/dQ in the market-consistent set), each of
    shape ``(n_paths, n_times)``; antithetic pairs are paths ``(2j, 2j+1)``.
    """
    if measure not in MEASURES:
        raise ValueError(f"unknown measure {measure!r}: use one of {MEASURES}")
    if times[0] != 0.0 or np.any(np.diff(times) <= 0.0):
        raise ValueError("times must start at 0 and increase")
    n_steps = times.size - 1
    d = len(model.state_names)
    laws = [model.step_law(float(times[k]), float(times[k + 1])) for k in range(n_steps)]
    z = _draw(rng, n_paths, n_steps, d, antithetic)

    states = np.empty((n_paths, n_steps + 1, d))
    states[:, 0, :] = model.initial_state()
    real_world = measure == "real_world"
    for k, law in enumerate(laws):
        inc = z[:, k, :] @ law.chol.T
        inc += law.drift + law.real_world_shift if real_world else law.drift
        np.matmul(states[:, k, :], law.transition.T, out=states[:, k + 1, :])
        states[:, k + 1, :] += inc

    eta = np.stack([density_coefficients(law) for law in laws]) if n_steps else np.zeros((0, d))
    log_w = np.zeros((n_paths, n_steps + 1))
    np.cumsum(log_density_increments(z, eta, measure=measure), axis=1, out=log_w[:, 1:])
    density = np.exp(log_w)

    out = model.columns(times, states)
    cash = out["cash_account"]
    out["deflator"] = density / cash if real_world else 1.0 / cash
    out[DENSITY_COLUMN[measure]] = density
    return out
