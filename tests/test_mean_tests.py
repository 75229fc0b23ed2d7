"""Size and power of the verdict rules for deflated prices, density means and risk premia.

Sources named beside each check:
- the lognormal mean identity ``E[e^L] = e^{mu + s^2/2}`` (any probability text; common
  practice) and Cox's method for the lognormal mean with the delta method (Land,
  *Technometrics* 14, 1972; Zhou and Gao, *Statistics in Medicine* 16, 1997; from memory);
- Bonferroni's inequality for the family level (common practice in multiple testing);
- the binomial standard error of a simulated rejection rate, ``sqrt(p (1 - p) / R)`` (common
  practice in Monte Carlo studies of tests);
- effective sample size ``(sum w)^2 / sum w^2`` as Kong (1992) defines it;
- a CIR factor's stationary law is a gamma law (Cox, Ingersoll and Ross, *Econometrica* 53,
  1985; from memory): the heavy-tailed non-lognormal null is a lognormal times a mean-1 gamma.

Null data sets are simulated in one array (columns are independent data sets), so 500 families
of 10 cells of 1,000 sampling units cost under a second. Every measured size and power is
printed in the terminal summary of the test run (``report_statistic``, tests/conftest.py).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import polygamma
from scipy.stats import norm

from pqflow.validation.mean_tests import (
    DENSITY_DEVIATION,
    LOGNORMAL,
    MARTINGALE_DEVIATION,
    ROBUST,
    CellMoments,
    mean_test,
    rule_for_asset,
    rule_for_density,
)
from pqflow.validation.moments import Moments
from pqflow.validation.summary import FAMILY_ALPHA, family_critical_z

UNITS = 1000  # sampling units per data set (antithetic: pairs)
FAMILIES = 400  # simulated null families per configuration
CELLS = 10  # cells per family
VARIANCES = (0.5, 2.0, 5.0)  # var(log w)


def _null(v: float, n_units: int, cols: int, antithetic: bool, rng: np.random.Generator, kind: str) -> np.ndarray:
    """Mean-1 samples ``(paths, cols)`` with ``var(log X) = v``: ``lognormal``, or ``product``
    (a lognormal times a mean-1 gamma with ``nu / 2`` shape: CIR-like, not lognormal). With
    antithetic pairs the normal is mirrored and the gamma factor shared by the pair."""
    z = rng.standard_normal((n_units, cols))
    if kind == "lognormal":
        s2, y = v, None
    else:
        nu = 8 if v < 1.0 else 4
        s2 = v - float(polygamma(1, nu / 2))  # var(log chi2_nu / nu) = trigamma(nu / 2)
        y = rng.chisquare(nu, (n_units, cols)) / nu
    if antithetic:
        z = np.stack([z, -z], axis=1).reshape(2 * n_units, cols)
        y = None if y is None else np.repeat(y, 2, axis=0)
    x = np.exp(np.sqrt(s2) * z - 0.5 * s2)
    return x if y is None else x * y


def _judge(x: np.ndarray, antithetic: bool, rule: str, deviation: float, n_cells: int):
    """Per column: failed, inconclusive (family critical value of ``n_cells`` cells)."""
    res = mean_test(CellMoments.of(x, antithetic), 1.0, rule, deviation=deviation)
    crit = family_critical_z(n_cells)
    failed = np.abs(res.z_score) > crit
    weak = ~(res.material_effect / res.statistic_se >= crit)
    return failed, weak & ~failed, res


def _family_rates(v, antithetic, rule, kind, seed, scale=1.0):
    """Share of families with a false alarm, and the per-cell inconclusive share."""
    rng = np.random.default_rng(seed)
    alarms, weak_cells = [], []
    for _ in range(FAMILIES // 100):  # 100 families a chunk keeps the arrays small
        x = scale * _null(v, UNITS, 100 * CELLS, antithetic, rng, kind)
        failed, weak, _ = _judge(x, antithetic, rule, MARTINGALE_DEVIATION, CELLS)
        alarms.append(failed.reshape(100, CELLS).any(axis=1))
        weak_cells.append(weak)
    return float(np.concatenate(alarms).mean()), float(np.concatenate(weak_cells).mean())


def _bound(rate: float, reps: int) -> float:
    """Nominal level plus 3 binomial standard errors."""
    return rate + 3.0 * np.sqrt(rate * (1.0 - rate) / reps)


# -- the statistic itself -----------------------------------------------------------------------


def test_lognormal_identity_estimates_the_log_mean_with_a_correct_standard_error():
    # E[e^L] = e^{mu + s^2/2}: the estimate of log E[X] is unbiased to its SE, and the
    # delta-method SE matches the spread over 2,000 replications (within 5%).
    rng = np.random.default_rng(11)
    mu, s2 = -0.3, 2.0
    for antithetic in (False, True):
        z = rng.standard_normal((UNITS, 2000))
        if antithetic:
            z = np.stack([z, -z], axis=1).reshape(2 * UNITS, 2000)
        m = CellMoments.of(np.exp(mu + np.sqrt(s2) * z), antithetic)
        est, se = m.log_mean, m.log_mean_std_error
        target = mu + s2 / 2
        assert abs(est.mean() - target) < 4 * est.std() / np.sqrt(est.size)
        assert np.median(se) == pytest.approx(est.std(), rel=0.05), antithetic


def test_streamed_moments_equal_the_whole_sample():
    rng = np.random.default_rng(12)
    x = np.exp(rng.standard_normal((1000, 4)))
    whole = CellMoments.of(x, True)
    first = CellMoments.of(x[:300], True)
    merged = first.merge(CellMoments.of(x[300:700], True, first.shift)).merge(CellMoments.of(x[700:], True,
                                                                                             first.shift))
    assert merged.count == 500 and merged.paths == 1000
    assert np.allclose(merged.log_mean, whole.log_mean, rtol=1e-12)
    assert np.allclose(merged.log_mean_std_error, whole.log_mean_std_error, rtol=1e-9)
    assert np.allclose(merged.x_std_error, whole.x_std_error, rtol=1e-9)
    # the plain standard error on pair means, as validation.moments computes it
    pairs = 0.5 * (x[0::2] + x[1::2])
    assert np.allclose(merged.x_std_error, pairs.std(axis=0, ddof=1) / np.sqrt(500), rtol=1e-9)


def test_rule_per_cell():
    assert rule_for_asset("zcb_10y", measure="market_consistent", credit_density=True) == LOGNORMAL
    assert rule_for_asset("dzcb_BBB_5y", measure="market_consistent", credit_density=False) == ROBUST
    assert rule_for_asset("cumulative_intensity_AA", measure="market_consistent", credit_density=False) == ROBUST
    assert rule_for_asset("zcb_10y", measure="real_world", credit_density=True) == ROBUST
    assert rule_for_asset("zcb_10y", measure="real_world", credit_density=False) == LOGNORMAL
    assert rule_for_density("q_density", credit_density=True) == ROBUST
    assert rule_for_density("q_density_rates_veldmark_all_share", credit_density=True) == LOGNORMAL
    assert rule_for_density("p_density_credit_BBB", credit_density=False) == ROBUST
    # a non-positive value cannot be logged: the robust t judges that cell
    x = np.exp(np.random.default_rng(1).standard_normal((200, 2)))
    x[3, 1] = 0.0
    res = mean_test(CellMoments.of(x, False), 1.0, LOGNORMAL, deviation=0.05)
    assert list(res.test) == [LOGNORMAL, ROBUST]


# -- size -----------------------------------------------------------------------------------------


@pytest.mark.parametrize("rule,kind", [(LOGNORMAL, "lognormal"), (ROBUST, "lognormal"), (ROBUST, "product")])
def test_size_at_most_the_family_level(rule, kind, report_statistic):
    # False alarms of families of 10 independent cells under the null, at the Bonferroni family
    # level 99%: at most 1% plus 3 binomial standard errors over 500 families.
    limit = _bound(FAMILY_ALPHA, FAMILIES)
    for v in VARIANCES:
        for antithetic in (False, True):
            rate, weak = _family_rates(v, antithetic, rule, kind, seed=int(v * 10) + antithetic)
            line = report_statistic(
                f"size of {rule} on a {kind} null, var(log w) = {v:g}, "
                f"{'antithetic pairs' if antithetic else 'independent paths'}: {rate:.3f} of {FAMILIES} families "
                f"(nominal {FAMILY_ALPHA:.2f}, limit {limit:.3f}); cells inconclusive {weak:.2f}")
            assert rate <= limit, line


def test_the_old_statistics_over_reject_where_the_new_do_not(report_statistic):
    # The plain t and Johnson's skewness-corrected t on the same lognormal null (var 2, 500
    # families of 10 cells): the plain t's false alarms exceed the family level (its low side;
    # the reason the plain t no longer judges).
    rng = np.random.default_rng(5)
    x = _null(2.0, UNITS, 100 * CELLS, False, rng, "lognormal")
    m = Moments.of(x)
    crit = family_critical_z(CELLS)
    plain = (m.mean - 1.0) / m.std_error
    plain_rate = float((np.abs(plain) > crit).reshape(100, CELLS).any(axis=1).mean())
    johnson_rate = float((np.abs(m.z_score(1.0)) > crit).reshape(100, CELLS).any(axis=1).mean())
    new_failed, _, _ = _judge(x, False, LOGNORMAL, MARTINGALE_DEVIATION, CELLS)
    new_rate = float(new_failed.reshape(100, CELLS).any(axis=1).mean())
    line = report_statistic(f"var(log w) = 2, 100 families: false alarms plain t {plain_rate:.2f}, "
                            f"Johnson t {johnson_rate:.2f}, lognormal identity {new_rate:.2f}")
    assert plain_rate > 0.03 and new_rate <= _bound(FAMILY_ALPHA, 100), line


# -- power ----------------------------------------------------------------------------------------


@pytest.mark.parametrize("rule,kind", [(LOGNORMAL, "lognormal"), (ROBUST, "product")])
def test_power_against_planted_bias_and_the_promise_of_a_conclusive_cell(rule, kind, report_statistic):
    # A planted bias of 5% and 20% (both signs) at each variance: shares of cells that fail,
    # are inconclusive and pass. The power rule promises that a cell reported conclusive
    # detects a 5% deviation at least half the time: among conclusive cells with a bias of at
    # least 5%, at most 50% may pass (plus 3 binomial SE).
    n_cols = 1000
    for v in VARIANCES:
        for antithetic in (False, True):
            for bias in (0.95, 1.05, 0.80, 1.20):
                rng = np.random.default_rng(int(v * 100) + int(bias * 100) + antithetic)
                x = bias * _null(v, UNITS, n_cols, antithetic, rng, kind)
                failed, weak, _ = _judge(x, antithetic, rule, MARTINGALE_DEVIATION, CELLS)
                passed = ~failed & ~weak
                conclusive = ~weak
                line = report_statistic(
                    f"power of {rule} ({kind}), var(log w) = {v:g}, {'antithetic' if antithetic else 'independent'}, "
                    f"mean x {bias:.2f}: fail {failed.mean():.3f}, inconclusive {weak.mean():.3f}, pass "
                    f"{passed.mean():.3f}")
                if conclusive.sum() >= 50:
                    share = passed.sum() / conclusive.sum()
                    assert share <= _bound(0.5, int(conclusive.sum())), line


def test_a_twenty_percent_low_density_mean_is_never_a_pass(report_statistic):
    # Lognormal weights with var(log w) = 4.9, 1,000 units, mean 0.8 (20% low), 400 seeds (one
    # per column): neither rule ever reports a pass; Johnson's t detected 0.9% of them.
    n_seeds = 400
    rng = np.random.default_rng(20261205)
    x = 0.8 * _null(4.9, UNITS, n_seeds, False, rng, "lognormal")
    crit = family_critical_z(50)  # a density check of 50 yearly cells
    johnson = float((np.abs(Moments.of(x).z_score(1.0)) > crit).mean())
    for rule in (LOGNORMAL, ROBUST):
        res = mean_test(CellMoments.of(x, False), 1.0, rule, deviation=DENSITY_DEVIATION)
        failed = np.abs(res.z_score) > crit
        weak = ~(res.material_effect / res.statistic_se >= crit)
        passed = ~failed & ~weak
        line = report_statistic(f"20% low density mean, var 4.9, {n_seeds} seeds, {rule}: fail {failed.mean():.3f}, "
                                f"inconclusive {(weak & ~failed).mean():.3f}, pass {passed.mean():.3f} "
                                f"(Johnson t detected {johnson:.3f})")
        assert not passed.any(), line


# -- the real-world risk premium ------------------------------------------------------------------


def test_risk_premium_false_alarms_before_and_after(report_statistic):
    # The demo's premium cells under the null (common practice: simulate the statistic): three
    # indices with risk premia 3.5%, 4% and 2.5% and volatilities 17%, 16% and 11% (close to the
    # demo's), S_t / (S_0 B_t) = exp(RP t + sigma W_t - sigma^2 t / 2) exactly, yearly to 50
    # years, 1,000 antithetic pairs; 50 short-rate cells complete the family of 200 cells
    # (Bonferroni z 4.06). The premium is estimated as (1/t) ln mean with the delta method's
    # se / mean / t (before) and by the lognormal identity (after). A simulated run with any
    # premium cell beyond 4.06 is a false alarm of a correct run.
    reps, pairs = 200, 1000
    premia, vols = np.array([0.035, 0.04, 0.025]), np.array([0.17, 0.16, 0.11])
    times = np.arange(1, 51, dtype=float)
    crit = family_critical_z(200)
    rng = np.random.default_rng(20260930)
    before = np.zeros(reps, dtype=bool)
    after = np.zeros(reps, dtype=bool)
    low_before = low_after = 0
    chunk = 50
    for rp, sig in zip(premia, vols, strict=True):
        for r0 in range(0, reps, chunk):
            w = np.cumsum(rng.standard_normal((pairs, chunk, times.size)), axis=2)  # W at whole years
            w = np.stack([w, -w], axis=1).reshape(2 * pairs, chunk * times.size)
            t = np.tile(times, chunk)
            m = CellMoments.of(np.exp(rp * t - 0.5 * sig**2 * t + sig * w), True)
            z_old = (np.log(m.x_mean) / t - rp) / (m.x_std_error / m.x_mean / t)
            z_new = mean_test(m, np.exp(rp * t), LOGNORMAL, deviation=MARTINGALE_DEVIATION).z_score
            before[r0:r0 + chunk] |= (np.abs(z_old) > crit).reshape(chunk, times.size).any(axis=1)
            after[r0:r0 + chunk] |= (np.abs(z_new) > crit).reshape(chunk, times.size).any(axis=1)
            low_before += int((z_old < -crit).sum())
            low_after += int((z_new < -crit).sum())
    cells = reps * premia.size * times.size
    expected_low = cells * norm.sf(crit)
    line = report_statistic(
        f"risk-premium check under the null, {reps} simulated demo-like runs: runs with a false alarm before "
        f"{before.mean():.3f}, after {after.mean():.3f} (family level {FAMILY_ALPHA:.2f}); premium cells below "
        f"-{crit:.2f}: before {low_before}, after {low_after} of {cells} (chance alone: {expected_low:.1f})")
    assert low_before >= 5 * expected_low, line  # the old statistic's low side: the reported problem
    assert low_after <= expected_low + 3 * np.sqrt(expected_low) + 1, line
    assert after.mean() <= _bound(FAMILY_ALPHA, reps), line


# -- effective sample size ------------------------------------------------------------------------


def test_effective_sample_size_is_kongs(tmp_path):
    # Kong (1992): ESS = (sum w)^2 / sum w^2; for lognormal weights its share tends to
    # exp(-var(log w)) (common practice; from the lognormal moments).
    from pqflow.validation.density import density_table

    class _Reader:  # the density table reads through this interface only
        measure = "real_world"
        antithetic = False
        set_dir = tmp_path

        def __init__(self, cols):
            self.cols = cols

        def column_names(self):
            return list(self.cols)

        def iter_arrays(self, columns):
            for part in np.array_split(np.arange(20000), 4):
                yield np.array([0.0, 1.0]), {c: self.cols[c][part] for c in columns}

    rng = np.random.default_rng(3)
    v = 1.0
    z = rng.standard_normal(20000)
    w = np.ones((20000, 2))
    w[:, 1] = np.exp(np.sqrt(v) * z - v / 2)
    block = np.ones((20000, 2))
    block[:, 1] = np.exp(0.5 * z - 0.125)  # a block-like density: lognormal, var(log) 0.25
    table = density_table(_Reader({"cpi": w, "q_density": w, "q_density_rates": block}))
    row = table[(table["column"] == "q_density") & (table["time"] == 1.0)].iloc[0]
    assert row["ess"] == pytest.approx(w[:, 1].sum() ** 2 / (w[:, 1] ** 2).sum(), rel=1e-12)
    assert row["ess_share"] == pytest.approx(np.exp(-v), rel=0.1)
    assert set(table["column"]) == {"q_density", "q_density_rates"}


def test_too_few_sampling_units_are_not_judged(report_statistic):
    """Below MIN_UNITS sampling units the normal approximation does not hold its size (measured
    here without the rule: families of 10 lognormal null cells, antithetic, var(log w) = 0.5 and
    2, nominal family level 1%); such cells are inconclusive, never a fail or a pass. At and
    above the minimum the rule judges and its size holds (within 1% + 3 binomial SE). Source:
    the lognormal mean identity and Bonferroni's inequality (common practice); the minimum is
    this measurement's."""
    from pqflow.validation.mean_tests import MIN_UNITS
    from pqflow.validation.summary import family_critical_z

    rng = np.random.default_rng(2026)
    zf = family_critical_z(10)
    fams = 300
    limit = 0.01 + 3 * np.sqrt(0.01 * 0.99 / fams)
    for rule in (LOGNORMAL, ROBUST):
        for v in (0.5, 2.0):
            rates = {}
            for units in (25, MIN_UNITS[rule]):
                raw = judged = 0
                for _ in range(fams):
                    g = rng.standard_normal((units, 10)) * np.sqrt(v)
                    x = np.empty((2 * units, 10))
                    x[0::2], x[1::2] = np.exp(-v / 2 + g), np.exp(-v / 2 - g)
                    res = mean_test(CellMoments.of(x, True), 1.0, rule, deviation=0.10)
                    judged += bool(np.any(np.abs(res.z_score) > zf))
                    raw += bool(np.any(np.abs(res.z_raw) > zf))
                rates[units] = (raw / fams, judged / fams)
            small, enough = rates[25], rates[MIN_UNITS[rule]]
            report_statistic(
                f"{rule}, var(log w) = {v}: family false alarms of the raw statistic at 25 units "
                f"{small[0]:.3f}, at {MIN_UNITS[rule]} units {enough[0]:.3f} (nominal 0.010); with the "
                f"minimum-units rule {small[1]:.3f} and {enough[1]:.3f}")
            assert small[1] == 0.0  # not judged: never a fail
            assert enough[1] <= limit, (rule, v, enough)


# -- a stochastic-volatility index is not lognormal ----------------------------------------------


def test_a_variance_mixture_is_judged_by_the_robust_t(report_statistic):
    # A deflated Heston-like index is a variance mixture of lognormals: X = exp(s Z - s^2/2) with
    # a random volatility s independent of Z, E[X] = 1 exactly (law of iterated expectations;
    # common practice). log X is not Gaussian and the lognormal identity estimates
    # log E[X] + Var(s^2)/8: biased upward, so it raises false alarms on a correct set (the
    # demo_smile Heston all-share reached z = 6.3 with a plain t of -0.9). The robust t, which
    # rule_for_asset gives an index named in non_lognormal, keeps its size.
    from pqflow.validation.mean_tests import stochastic_volatility_assets

    assert stochastic_volatility_assets({"x": {}}) == {"equity_x", "property_x"}
    assert stochastic_volatility_assets({}) == frozenset()
    assert rule_for_asset("equity_x", measure="market_consistent", credit_density=False,
                          non_lognormal={"equity_x"}) == ROBUST
    rng = np.random.default_rng(20261206)
    rates = {}
    for rule in (LOGNORMAL, ROBUST):
        alarms = []
        for _ in range(FAMILIES // 100):
            s = np.sqrt(rng.choice([0.05, 2.0], size=(UNITS, 100 * CELLS)))  # total variance 0.05 or 2
            z = rng.standard_normal((UNITS, 100 * CELLS))
            x = np.exp(s * z - 0.5 * s * s)
            failed, _, _ = _judge(x, False, rule, MARTINGALE_DEVIATION, CELLS)
            alarms.append(failed.reshape(100, CELLS).any(axis=1))
        rates[rule] = float(np.concatenate(alarms).mean())
    limit = _bound(FAMILY_ALPHA, FAMILIES)
    line = report_statistic(
        f"variance mixture of lognormals (total variance 0.05 or 2, {FAMILIES} families of {CELLS} cells): "
        f"false alarms lognormal identity {rates[LOGNORMAL]:.3f}, robust t {rates[ROBUST]:.3f} (limit {limit:.3f})")
    assert rates[ROBUST] <= limit, line
    assert rates[LOGNORMAL] > limit, line  # the reason a stochastic-volatility index leaves the identity
