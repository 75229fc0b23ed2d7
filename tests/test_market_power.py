"""Size and power of the market-consistency verdict rule (quote cells, thin cells, power rule).

Sources named beside each check:
- Black-Scholes prices of calls and puts on a lognormal index (Black and Scholes, 1973; with
  zero rates and no dividends Black's formula on the forward, :func:`option_price`; common
  practice): the known prices the simulated payoffs are judged against;
- Bonferroni's inequality for the family level (common practice in multiple testing);
- the binomial standard error of a simulated rejection rate, ``sqrt(p (1 - p) / R)`` (common
  practice in Monte Carlo studies of tests).

Every simulated data set is a family like the smile demo's: 2,000 scenarios as 1,000 antithetic
pairs, calls and puts from deep in to deep out of the money at 1 and 5 years, each judged against
its quote (with the stated tolerance) and against the model price (no tolerance), 22 cells. The
paths are exact lognormal draws, so the quoted price is the true expectation (null) or the
quote is the price at a volatility shifted by a planted amount (power). Figures are printed in
the terminal summary (``report_statistic``, tests/conftest.py).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pqflow.calibration.formulas import option_price
from pqflow.validation.market_consistency import (
    DEFAULT_VOL_TOLERANCE,
    MIN_PAYING_UNITS,
    InstrumentSpec,
    _material_price,
    _vega,
    quote_cells,
)
from pqflow.validation.summary import FAMILY_ALPHA, family_critical_z, inconclusive_mask

S0, SIGMA = 100.0, 0.20
PAIRS = 1000
FAMILIES = 400
CELLS = (  # (expiry, strike, kind)
    (1.0, 100.0, "call"), (1.0, 120.0, "call"), (1.0, 150.0, "call"), (1.0, 175.0, "call"), (1.0, 80.0, "put"), (1.0,
                                                                                                                 60.0,
                                                                                                                 "put"),
    (5.0, 100.0, "call"), (5.0, 150.0, "call"), (5.0, 200.0, "call"), (5.0, 80.0, "put"), (5.0, 50.0, "put"),
)


def _spec(expiry: float, strike: float, kind: str) -> InstrumentSpec:
    price = float(option_price("lognormal", S0, strike, SIGMA, expiry, annuity=1.0, kind=kind))
    return InstrumentSpec(
        label=f"{kind} {expiry:g}y K={strike:g}", kind="equity_option", option=kind, expiry=expiry, strike=strike,
        convention="lognormal", shift=0.0, tenor=None, index="x", forward=S0, annuity=1.0, market_vol=SIGMA,
        market_price=price, stated_market_price=None, model_price=price, column_names=("equity_x",),
        untestable=None, income_yield=0.0)


def _families(sigma_paths: float, n_families: int, seed: int, pairs: int = PAIRS):
    """Per cell and family: fail, inconclusive, thin (too few paying units); and family alarms.
    Quote cells first (``CELLS`` order), then model-price cells."""
    rng = np.random.default_rng(seed)
    specs = [_spec(*c) for c in CELLS]
    n = len(specs)
    crit = family_critical_z(2 * n)
    mc = np.empty((n, n_families))
    se = np.empty_like(mc)
    paying = np.empty_like(mc)
    chunk = max(1, min(n_families, 4_000_000 // pairs))
    for c0 in range(0, n_families, chunk):
        c1 = min(n_families, c0 + chunk)
        _simulate(specs, sigma_paths, rng, pairs, mc[:, c0:c1], se[:, c0:c1], paying[:, c0:c1])
    failed, weak, thin = _judge(specs, mc, se, paying, crit)
    return failed, weak, thin, failed.any(axis=0), crit


def _judge(specs, mc, se, paying, crit):
    """The check's rule on ``(cells, families)`` arrays: each quote judged against its market
    price with the stated tolerance, then against the model price without one. Returns
    ``(failed, weak, thin)``, each ``(2 * cells, families)``, quote cells first."""
    n, n_families = mc.shape
    tol = np.array([abs(_vega(s)) * DEFAULT_VOL_TOLERANCE["lognormal"] for s in specs])
    material = np.array([_material_price(s, _vega(s), DEFAULT_VOL_TOLERANCE) for s in specs])
    price = np.array([s.market_price for s in specs])

    def cells(tolerance: np.ndarray):
        rep = lambda v: np.repeat(v[:, None], n_families, axis=1).ravel()  # noqa: E731
        return quote_cells(mc.ravel(), se.ravel(), rep(price), rep(tolerance), rep(material), paying.ravel())

    table = pd.concat([cells(tol), cells(np.zeros(n))], ignore_index=True)
    failed = (table["z_score"].abs() > crit).to_numpy().reshape(2 * n, n_families)
    weak = inconclusive_mask(table, crit).to_numpy().reshape(2 * n, n_families)
    thin = (~table["judged"].to_numpy()).reshape(2 * n, n_families)
    return failed, weak, thin


def _simulate(specs, sigma_paths, rng, pairs, mc, se, paying) -> None:
    """Fill ``mc``, ``se``, ``paying`` ``(cells, families)`` from exact antithetic lognormal draws."""
    n_families = mc.shape[1]
    for expiry in sorted({s.expiry for s in specs}):
        z = rng.standard_normal((pairs, n_families))
        up = S0 * np.exp(sigma_paths * np.sqrt(expiry) * z - 0.5 * sigma_paths**2 * expiry)
        down = S0 * np.exp(-sigma_paths * np.sqrt(expiry) * z - 0.5 * sigma_paths**2 * expiry)
        for j, s in enumerate(specs):
            if s.expiry != expiry:
                continue
            w = 1.0 if s.option == "call" else -1.0
            a, b = np.maximum(w * (up - s.strike), 0.0), np.maximum(w * (down - s.strike), 0.0)
            unit = 0.5 * (a + b)
            mc[j], se[j] = unit.mean(axis=0), unit.std(axis=0, ddof=1) / np.sqrt(pairs)
            paying[j] = ((a > 0) | (b > 0)).sum(axis=0)


def _bound(rate: float, reps: int) -> float:
    """Nominal level plus 3 binomial standard errors."""
    return rate + 3.0 * np.sqrt(rate * (1.0 - rate) / reps)


def test_quote_cells_score_beyond_the_tolerance_and_leave_thin_cells_unjudged():
    # The score is the excess over the tolerance in standard errors (the check's stated rule);
    # a cell with fewer than MIN_PAYING_UNITS paying units, or no standard error, is not judged.
    t = quote_cells([1.3, 0.7, 1.3, 1.0], [0.1, 0.1, 0.1, 0.0], [1.0] * 4, [0.1] * 4, [0.5] * 4,
                    [100, 100, MIN_PAYING_UNITS - 1, 100])
    assert t["z_normal_approximation"].iloc[:3].tolist() == pytest.approx([2.0, -2.0, 2.0])
    assert t["z_score"].tolist() == pytest.approx([2.0, -2.0, 0.0, 0.0])
    assert t["judged"].tolist() == [True, True, False, False]
    assert t["material_effect"].iloc[:2].tolist() == pytest.approx([0.4, 0.4])
    assert t["material_effect"].iloc[2:].isna().all()
    # the thin and the unmeasured cells are inconclusive whatever their raw score; 0.4 / 0.1 = 4
    # clears the critical value 3, so the judged cells are conclusive
    assert inconclusive_mask(t, 3.0).tolist() == [False, False, True, True]


def test_material_price_is_the_harder_side_of_a_one_point_vol_move():
    # Deep out of the money, a price moves less for a vol point down than up (Black-Scholes vomma
    # is positive there): the material deviation is the smaller move.
    s = _spec(1.0, 150.0, "call")
    at = s.market_price
    up = float(option_price("lognormal", S0, 150.0, SIGMA + 0.01, 1.0, kind="call"))
    down = float(option_price("lognormal", S0, 150.0, SIGMA - 0.01, 1.0, kind="call"))
    assert up - at > at - down > 0
    assert _material_price(s, _vega(s), DEFAULT_VOL_TOLERANCE) == pytest.approx(at - down, rel=1e-12)


@pytest.mark.parametrize("pairs", [PAIRS, 20 * PAIRS])
def test_size_of_the_market_consistency_rule(pairs, report_statistic):
    # 400 null families (paths at the quoted volatility) of 2,000 and 40,000 scenarios: the share
    # with any failing cell is at most the family level 1% plus 3 binomial standard errors.
    n_fam = FAMILIES if pairs == PAIRS else FAMILIES // 2
    failed, weak, thin, alarms, crit = _families(SIGMA, n_fam, seed=20261205 + pairs, pairs=pairs)
    limit = _bound(FAMILY_ALPHA, n_fam)
    n = len(CELLS)
    line = report_statistic(
        f"market consistency, size: {alarms.mean():.4f} of {n_fam} null families of {2 * n} cells ({2 * pairs:,} "
        f"antithetic scenarios, z {crit:.2f}) with a false alarm (nominal {FAMILY_ALPHA:.2f}, limit {limit:.3f}); "
        f"cells inconclusive {weak.mean():.2f}, too few paying units {thin.mean():.2f}")
    assert alarms.mean() <= limit, line
    if pairs == PAIRS:
        # the 1-year 175% call pays on a handful of pairs (P(S_1 > 175) about 0.2%): never judged;
        # the at-the-money call always is
        assert thin[3].all() and thin[n + 3].all() and not thin[0].any(), line


@pytest.mark.parametrize("shift,pairs", [(0.01, 20 * PAIRS), (-0.01, 20 * PAIRS), (0.02, PAIRS), (-0.02, PAIRS)])
def test_power_against_a_planted_vol_shift(shift, pairs, report_statistic):
    # Paths at the quoted volatility + shift (a calibration off by |shift|): the rule promises
    # that a conclusive cell sees a deviation of the material size (1 vol point) at least half
    # the time: among conclusive cells at least 1 point off, at most 50% (+ 3 binomial SE) pass.
    # At 2,000 scenarios almost every quote cell is inconclusive (a 0.5-point excess over the
    # tolerance is about one standard error); 40,000 make most of them conclusive.
    n_fam = 200 if pairs == PAIRS else 100
    failed, weak, thin, alarms, _ = _families(SIGMA + shift, n_fam, seed=int(1000 * (shift + 1)), pairs=pairs)
    passed = ~failed & ~weak
    conclusive = ~weak
    n = len(CELLS)
    per_cell = ", ".join(f"{s[2]} {s[0]:g}y {s[1]:g}: fail {failed[j].mean():.2f} / inc {weak[j].mean():.2f}"
                         for j, s in enumerate(CELLS))
    line = report_statistic(
        f"market consistency, power vs a {shift * 100:+g} vol point shift, {n_fam} families of {2 * pairs:,} "
        f"scenarios: families failing "
        f"{alarms.mean():.3f}; quote cells fail {failed[:n].mean():.3f}, inconclusive {weak[:n].mean():.3f}, "
        f"pass {passed[:n].mean():.3f}; model cells fail {failed[n:].mean():.3f}, inconclusive "
        f"{weak[n:].mean():.3f}, pass {passed[n:].mean():.3f}; quote cells: {per_cell}")
    share = passed.sum() / max(conclusive.sum(), 1)
    assert conclusive.sum() >= 50 and share <= _bound(0.5, int(conclusive.sum())), line
    if abs(shift) >= 0.02:  # a 2-point error is found in most families
        assert alarms.mean() >= 0.9, line


# ---------------------------------------------------------------- the real-world set, weighted
# The real-world set reprices the same quotes as E_P[q_density X] (Girsanov). Its paths follow the
# index with an equity price of risk LAMBDA: W^Q = W^P + LAMBDA t, q_density = dQ/dP =
# exp(-LAMBDA W^P_T - LAMBDA^2 T / 2) (Cameron-Martin-Girsanov for a constant price of risk; common
# practice), and the market-consistent set's p_density = 1 / q_density on its own paths. A put's
# payoff sits where the weights are large, so a sample that misses them has a low mean and a low
# standard error together: the plain rule's false alarms there are many times its level. The
# check floors the standard error with the spread the market-consistent set implies
# (pqflow.validation.moments.spread_from_other_measure).
LAMBDA = 0.4
#: the real-world family: puts down to where only the large weights pay
WEIGHTED_CELLS = (
    (1.0, 100.0, "call"), (1.0, 80.0, "put"), (5.0, 100.0, "call"), (5.0, 150.0, "call"),
    (5.0, 80.0, "put"), (5.0, 65.0, "put"), (5.0, 55.0, "put"),
)


def _weighted_families(sigma_paths: float, n_families: int, seed: int, pairs: int):
    """As :func:`_families`, for the real-world cells: ``(failed, weak, failed_plain, alarms,
    alarms_plain)``."""
    from pqflow.validation.moments import spread_from_other_measure

    rng = np.random.default_rng(seed)
    specs = [_spec(*c) for c in WEIGHTED_CELLS]
    n = len(specs)
    crit = family_critical_z(2 * n)
    mc = np.empty((n, n_families))
    se_sample = np.empty_like(mc)
    se_floor = np.empty_like(mc)
    paying = np.empty_like(mc)
    chunk = max(1, min(n_families, 2_000_000 // pairs))
    for c0 in range(0, n_families, chunk):
        c1 = min(n_families, c0 + chunk)
        m = c1 - c0
        for expiry in sorted({s.expiry for s in specs}):
            zp = rng.standard_normal((pairs, m)) * np.sqrt(expiry)
            zq = rng.standard_normal((pairs, m)) * np.sqrt(expiry)
            level_p, weight_p, level_q, p_density = [], [], [], []
            for sign in (1.0, -1.0):
                w_p, w_q = sign * zp, sign * zq
                level_p.append(S0 * np.exp(sigma_paths * (w_p + LAMBDA * expiry) - 0.5 * sigma_paths**2 * expiry))
                weight_p.append(np.exp(-LAMBDA * w_p - 0.5 * LAMBDA**2 * expiry))
                level_q.append(S0 * np.exp(sigma_paths * w_q - 0.5 * sigma_paths**2 * expiry))
                p_density.append(np.exp(LAMBDA * w_q - 0.5 * LAMBDA**2 * expiry))
            for j, s in enumerate(specs):
                if s.expiry != expiry:
                    continue
                w = 1.0 if s.option == "call" else -1.0
                xp = [q * np.maximum(w * (lv - s.strike), 0.0) for q, lv in zip(weight_p, level_p, strict=True)]
                yq = [np.maximum(w * (lv - s.strike), 0.0) for lv in level_q]
                unit = 0.5 * (xp[0] + xp[1])
                mc[j, c0:c1] = unit.mean(axis=0)
                se_sample[j, c0:c1] = unit.std(axis=0, ddof=1) / np.sqrt(pairs)
                paying[j, c0:c1] = ((xp[0] > 0) | (xp[1] > 0)).sum(axis=0)
                second = np.mean([y * y / p for y, p in zip(yq, p_density, strict=True)], axis=(0, 1))
                first = np.mean(yq, axis=(0, 1))
                se_floor[j, c0:c1] = spread_from_other_measure(second, first, 2 * pairs)
    failed, weak, _ = _judge(specs, mc, np.maximum(se_sample, se_floor), paying, crit)
    failed_plain, _, _ = _judge(specs, mc, se_sample, paying, crit)
    return failed, weak, failed_plain, failed.any(axis=0), failed_plain.any(axis=0), crit


@pytest.mark.parametrize("pairs", [250, PAIRS])
def test_size_of_the_real_world_repricing_rule(pairs, report_statistic):
    # 400 null real-world families (500 and 2,000 scenarios; each with its own market-consistent
    # set of the same size): with the floor, the share with a false alarm is at most the family
    # level 1% plus 3 binomial standard errors; without it, the deep put cells alone exceed it.
    n_fam = FAMILIES
    failed, weak, failed_plain, alarms, alarms_plain, crit = _weighted_families(
        SIGMA, n_fam, seed=20261206 + pairs, pairs=pairs)
    limit = _bound(FAMILY_ALPHA, n_fam)
    n = len(WEIGHTED_CELLS)
    per_cell = ", ".join(f"{s[2]} {s[0]:g}y {s[1]:g}: {failed_plain[n + j].mean():.3f}/{failed[n + j].mean():.3f}"
                         for j, s in enumerate(WEIGHTED_CELLS))
    line = report_statistic(
        f"market consistency, real-world set (price of risk {LAMBDA}), size: {alarms.mean():.4f} of {n_fam} null "
        f"families of {2 * n} cells ({2 * pairs:,} antithetic scenarios, z {crit:.2f}) with a false alarm "
        f"(limit {limit:.3f}); without the market-consistent floor {alarms_plain.mean():.4f}; cells inconclusive "
        f"{weak.mean():.2f}; model-price cells' false alarms plain/floored: {per_cell}")
    assert alarms.mean() <= limit, line
    if pairs == 250:  # the failure the floor removes (the demo's G2++ run at 500 scenarios met it)
        assert alarms_plain.mean() > limit, line


@pytest.mark.parametrize("shift", [0.01, -0.01, 0.02, -0.02])
def test_power_of_the_real_world_repricing_rule(shift, report_statistic):
    # Both sets simulated 1 or 2 points off the quoted volatility (a miscalibration), 40,000
    # scenarios: the floor must not blind the rule. Among conclusive cells at least one material
    # size off, at most 50% (+ 3 binomial SE) pass; at 2 points most families fail.
    n_fam = 60
    failed, weak, _, alarms, _, _ = _weighted_families(SIGMA + shift, n_fam, seed=int(5000 * (shift + 1)),
                                                        pairs=20 * PAIRS)
    passed = ~failed & ~weak
    conclusive = ~weak
    n = len(WEIGHTED_CELLS)
    share = passed.sum() / max(conclusive.sum(), 1)
    line = report_statistic(
        f"market consistency, real-world set, power vs a {shift * 100:+g} vol point shift, {n_fam} families of "
        f"40,000 scenarios: families failing {alarms.mean():.3f}; quote cells fail {failed[:n].mean():.3f}, "
        f"inconclusive {weak[:n].mean():.3f}; conclusive cells passing {share:.3f}")
    assert conclusive.sum() >= 50 and share <= _bound(0.5, int(conclusive.sum())), line
    if abs(shift) >= 0.02:
        assert alarms.mean() >= 0.9, line
