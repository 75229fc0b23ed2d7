"""Heston accuracy figures quoted in the README (not part of `make test` or `make bench`).

    python benchmarks/heston_accuracy.py bias     # the scheme's bias on option prices by substeps
    python benchmarks/heston_accuracy.py h1hw     # H1-HW's error against Monte Carlo of the full model

bias: 200,000 antithetic paths of the market-consistent scheme (deterministic rates, the demo
smile's generating parameters) against the semi-closed form, per 100 of spot.
h1hw: difference of differences with common random numbers, [MC(rho) - MC(0)] - [H1HW(rho) -
exact(0)], 10 seeds of 20,000 paths, for rho_Sr = +0.3 and -0.3.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from pqflow.models.heston import HestonParams, heston_option_price  # noqa: E402
from pqflow.models.hull_white import HullWhiteParams  # noqa: E402
from pqflow.simulation.heston_scheme import simulate_heston_paths  # noqa: E402


def bias() -> None:
    p = HestonParams(v0=0.029, kappa=1.1, theta=0.042, xi=0.55, rho=-0.72)
    r, q, n = 0.025, 0.028, 200_000
    for t in (1.0, 5.0, 10.0):
        times = np.arange(0, t + 1e-9, 1.0)
        df, fwd = np.exp(-r * t), np.exp((r - q) * t)
        m = np.array([0.7, 1.0, 1.3])
        kinds = np.where(m < 1, "put", "call")
        ref = heston_option_price(p, level=1.0, dividend_yield=q, discount=df, expiry=t, strike=m * fwd, kind=kinds)
        for sub in (1, 4, 12, 52):
            paths = simulate_heston_paths(p, times, np.random.default_rng(7), measure="market_consistent", n_paths=n,
                                          substeps=sub, log_carry=np.full((n, times.size - 1), r), antithetic=True)
            st = np.exp(paths.log_return[:, -1] - q * t)
            pay = df * np.where(m < 1, np.maximum(m * fwd - st[:, None], 0), np.maximum(st[:, None] - m * fwd, 0))
            pairs = 0.5 * (pay[0::2] + pay[1::2])
            print(f"T {t:g}, {sub:2d} substeps a year: bias per 100 of spot {np.round(100 * (pairs.mean(0) - ref), 3)} "
                  f"(SE {np.round(100 * pairs.std(0) / np.sqrt(pairs.shape[0]), 3)})", flush=True)


def h1hw() -> None:
    from test_heston_pricing import _mc_heston_hw

    p = HestonParams(v0=0.04, kappa=1.0, theta=0.04, xi=0.5, rho=-0.6)
    hw = HullWhiteParams(mean_reversion=0.05, volatility=0.012)
    s0, r, t = 100.0, 0.02, 10.0
    strikes = [70.0, 100.0, 140.0]
    for rho in (0.3, -0.3):
        diffs = []
        for seed in range(10):
            a = _mc_heston_hw(p, hw, rho, t=t, strikes=strikes, s0=s0, r=r, n_paths=20000, steps_per_year=12, seed=seed)
            b = _mc_heston_hw(p, hw, 0.0, t=t, strikes=strikes, s0=s0, r=r, n_paths=20000, steps_per_year=12, seed=seed)
            diffs.append(a - b)
        d = np.concatenate(diffs)
        df = np.exp(-r * t)
        f = (heston_option_price(p, level=s0, dividend_yield=0.0, discount=df, expiry=t, strike=strikes, rates=hw,
                                 correlation=rho)
             - heston_option_price(p, level=s0, dividend_yield=0.0, discount=df, expiry=t, strike=strikes, rates=hw,
                                   correlation=0.0))
        print(f"rho_Sr {rho:+.1f}: MC {np.round(d.mean(0), 3)} (SE {np.round(d.std(0) / np.sqrt(len(d)), 3)}), "
              f"H1-HW {np.round(f, 3)}, H1-HW - MC {np.round(f - d.mean(0), 3)}", flush=True)


if __name__ == "__main__":
    {"bias": bias, "h1hw": h1hw}[sys.argv[1] if len(sys.argv) > 1 else "bias"]()
