"""CIR++ default intensities by rating: closed forms, the full-truncation Euler scheme, its bias,
the martingale property and the real-world density.

References used below:
- QuantLib 1.44 (PyPI ``QuantLib``): ``ql.CoxIngersollRoss(r0, theta, k, sigma).discountBond``
  (the CIR zero-coupon bond), ``ql.ExtendedCoxIngersollRoss(curve, theta, k, sigma, x0)`` (CIR++
  fitted to a curve) and ``ql.HazardRateCurve`` (piecewise-flat hazard survival curve).
- ``scipy.integrate.solve_ivp`` on the Riccati equations of the affine transform
  ``E[exp(-c int y)] = exp(a(u) - b(u) y)``: ``b' = c - kappa b - nu^2 b^2 / 2``,
  ``a' = -kappa mu b`` (Duffie, Pan and Singleton, *Econometrica* 68 (2000); from memory).
- Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006, ch. 3.9: the
  CIR++ shift fits today's curve exactly; the CIR mean ``E[y_t] = mu + (y_0 - mu) e^{-kappa t}``
  (ch. 3.2.3; section number from memory).
- Girsanov's theorem in discrete time (Glasserman, *Monte Carlo Methods in Financial
  Engineering*, 2004, §4.6, importance sampling; section from memory): reweighting by the ratio
  of the two chains' transition densities gives the other measure's expectations.
- Lord, Koekkoek and van Dijk, *Quantitative Finance* 10 (2010): the full-truncation scheme
  (first-order weak bias); the bias bounds are the ones stated in
  :mod:`pqflow.models.cir_credit`.

Monte Carlo tolerances are in standard errors (3 SE) with fixed seeds, plus the stated scheme
bias bound where the comparison is against the continuous-time closed form.
Time convention for QuantLib: Actual/365 Fixed, dates ``today + n`` days, pqflow time ``n / 365``.
"""

from __future__ import annotations

import numpy as np
import pytest
import QuantLib as ql
from credit_helpers import defaultable_bond_columns, survival_probability
from scipy.integrate import quad, solve_ivp

from pqflow.market.curve import LogDiscountCurve
from pqflow.measure.cir_density import price_of_risk_for_long_run_mean, real_world_square_root_drift
from pqflow.models.cir_credit import (
    CirCreditModel,
    CirParams,
    CreditRating,
    HazardCurve,
    cir_forward,
    cir_laplace,
    credit_factor,
    real_world_cir,
    shift,
    shift_integral,
)
from pqflow.simulation.credit import simulate_credit
from pqflow.storage.names import cumulative_intensity_column, dzcb_column, intensity_column, spread_column

__all__: list[str] = []

TODAY = ql.Date(15, 1, 2025)
DAY_COUNT = ql.Actual365Fixed()

#: The typical investment-grade parameter set of the bias statement (Feller ratio 1.11).
IG = CirParams(mean_reversion=0.4, long_run_mean=0.02, volatility=0.12, initial=0.012)
#: The same with a volatility that violates Feller (ratio 0.26): the factor often hits 0.
NON_FELLER = CirParams(mean_reversion=0.4, long_run_mean=0.02, volatility=0.25, initial=0.012)
RECOVERY = 0.4

# Bias bounds stated in pqflow.models.cir_credit (bp of the 10-year zero spread).
BIAS_BP_ANNUAL_IG, BIAS_BP_MONTHLY_IG = 5.0, 0.5
BIAS_BP_ANNUAL_NON_FELLER, BIAS_BP_MONTHLY_NON_FELLER = 20.0, 1.5

PILLAR_DAYS = np.array([365, 730, 1095, 1826, 2557, 3652, 5478, 7305, 10957])
HAZARDS = np.array([0.015, 0.018, 0.021, 0.024, 0.026, 0.028, 0.030, 0.030, 0.029])


@pytest.fixture(autouse=True)
def _evaluation_date():
    saved = ql.Settings.instance().evaluationDate
    ql.Settings.instance().evaluationDate = TODAY
    yield
    ql.Settings.instance().evaluationDate = saved


def _hazard() -> HazardCurve:
    return HazardCurve(knots=PILLAR_DAYS / 365.0, hazards=HAZARDS)


def _rating(params: CirParams = IG, recovery: float = RECOVERY, theta: float = 0.0, name: str = "BBB"):
    return CreditRating(name=name, cir=params, hazard=_hazard(), recovery=recovery, price_of_risk=theta)


def _flat_curve(rate: float = 0.03) -> LogDiscountCurve:
    return LogDiscountCurve.from_zero_rates(np.array([1.0, 30.0, 60.0]), np.full(3, rate))


def _mean_se(v: np.ndarray) -> tuple[float, float]:
    return float(v.mean()), float(v.std(ddof=1) / np.sqrt(v.size))


# --------------------------------------------------------------------------- closed forms


@pytest.mark.parametrize(
    "params", [IG, CirParams(mean_reversion=1.2, long_run_mean=0.03, volatility=0.2, initial=0.05)]
)
def test_cir_bond_matches_quantlib(params: CirParams) -> None:
    # QuantLib's CIR constructor refuses parameters that violate Feller ("invalid value"); the
    # Feller-violating set is checked against the Riccati equations below.
    p = params
    model = ql.CoxIngersollRoss(p.initial, p.long_run_mean, p.mean_reversion, p.volatility)
    for u in (0.25, 1.0, 5.0, 10.0, 30.0, 80.0):
        log_a, b = cir_laplace(params, 1.0, u)
        ours = float(np.exp(log_a - b * params.initial))
        ref = model.discountBond(0.0, u, params.initial)  # QuantLib CIR zero-coupon bond
        assert ours == pytest.approx(ref, rel=1e-12)


@pytest.mark.parametrize("c", [0.35, 0.6, 1.0, 2.5])
def test_scaled_laplace_matches_riccati_ode(c: float) -> None:
    p = NON_FELLER

    def rhs(_t, v):  # affine Riccati equations (Duffie, Pan and Singleton 2000; from memory)
        _a, b = v
        kappa, mu, nu = p.mean_reversion, p.long_run_mean, p.volatility
        return [-kappa * mu * b, c - kappa * b - 0.5 * nu**2 * b * b]

    sol = solve_ivp(rhs, (0.0, 40.0), [0.0, 0.0], rtol=1e-12, atol=1e-15, dense_output=True)
    for u in (0.5, 3.0, 10.0, 40.0):
        log_a, b = cir_laplace(p, c, u)
        a_ref, b_ref = sol.sol(u)
        assert float(log_a) == pytest.approx(a_ref, rel=1e-8)
        assert float(b) == pytest.approx(b_ref, rel=1e-8)


def test_forward_is_the_derivative_of_the_log_price() -> None:
    # Definition f_c(u) = -d/du [ln A_c(u) - B_c(u) y_0]; central difference, and f_c(0) = c y_0.
    for c in (0.6, 1.0):
        def g(u: float, c: float = c) -> float:
            log_a, b = cir_laplace(IG, c, u)
            return float(-(log_a - b * IG.initial))

        for u in (0.5, 4.0, 20.0):
            fd = (g(u + 1e-4) - g(u - 1e-4)) / 2e-4
            assert float(cir_forward(IG, c, u)) == pytest.approx(fd, rel=1e-7)
        assert float(cir_forward(IG, c, 0.0)) == pytest.approx(c * IG.initial, rel=1e-15)


def test_zero_volatility_is_the_deterministic_factor() -> None:
    # nu = 0: y_t = mu + (y0 - mu) e^{-kappa t} (the ODE solution), so
    # int_0^u y = mu u + (y0 - mu)(1 - e^{-kappa u}) / kappa, and the transform is its exponential.
    p0 = CirParams(mean_reversion=0.4, long_run_mean=0.02, volatility=0.0, initial=0.012)
    u = np.array([0.5, 5.0, 30.0])
    integral = 0.02 * u + (0.012 - 0.02) * (1.0 - np.exp(-0.4 * u)) / 0.4
    log_a, b = cir_laplace(p0, 0.6, u)
    np.testing.assert_allclose(log_a - b * p0.initial, -0.6 * integral, rtol=1e-14)
    # ... and a tiny volatility is continuous with it (no cancellation in the nu -> 0 limit).
    p_small = CirParams(mean_reversion=0.4, long_run_mean=0.02, volatility=1e-7, initial=0.012)
    log_a_s, b_s = cir_laplace(p_small, 0.6, u)
    np.testing.assert_allclose(log_a_s - b_s * p0.initial, -0.6 * integral, rtol=1e-12)


def test_hazard_curve_matches_quantlib_hazard_rate_curve() -> None:
    hazard = _hazard()
    dates = [TODAY] + [TODAY + int(d) for d in PILLAR_DAYS]
    ref = ql.HazardRateCurve(dates, [float(HAZARDS[0])] + [float(h) for h in HAZARDS], DAY_COUNT)
    for days in (100, 365, 500, 1500, 3652, 9000, 10957):
        t = days / 365.0
        assert float(hazard.survival(t)) == pytest.approx(ref.survivalProbability(t), rel=1e-13)
        if days not in PILLAR_DAYS:
            assert float(hazard.hazard(t)) == pytest.approx(ref.hazardRate(t), rel=1e-13)


def test_shifted_price_matches_quantlib_extended_cir() -> None:
    # Zero recovery: the credit factor is the CIR++ bond on the survival curve exp(-H), which
    # QuantLib's ExtendedCoxIngersollRoss fits as a discount curve (log-linear = flat hazard).
    rating = _rating(recovery=0.0)
    dates = [TODAY] + [TODAY + int(d) for d in PILLAR_DAYS]
    dfs = [1.0] + [float(q) for q in _hazard().survival(PILLAR_DAYS / 365.0)]
    handle = ql.YieldTermStructureHandle(ql.DiscountCurve(dates, dfs, DAY_COUNT))
    ref = ql.ExtendedCoxIngersollRoss(
        handle, IG.long_run_mean, IG.mean_reversion, IG.volatility, IG.initial
    )
    for t, m, y in [(0.0, 5.0, IG.initial), (2.5, 4.0, 0.03), (1.5, 10.0, 0.005), (7.3, 12.0, 0.02)]:
        short_intensity = y + float(shift(rating, t))  # QuantLib takes the shifted short rate
        assert float(credit_factor(rating, t, m, y)) == pytest.approx(
            ref.discountBond(t, t + m, short_intensity), rel=1e-9  # QL's forward: finite difference
        )


def test_time_zero_reprices_the_market_curve_exactly() -> None:
    # CIR++ exact fit (Brigo and Mercurio 2006, ch. 3.9): S_L(0, T) = exp(-L H(T)) for every T,
    # and the shift integral is the integral of the shift (scipy.integrate.quad).
    rating = _rating()
    t = np.concatenate((PILLAR_DAYS / 365.0, [0.3, 4.2, 13.0, 45.0]))
    np.testing.assert_allclose(
        credit_factor(rating, 0.0, t, IG.initial),
        np.exp(-(1 - RECOVERY) * _hazard().integrated(t)),
        rtol=1e-13,
    )
    knots = [k for k in PILLAR_DAYS / 365.0 if k < 12.0]  # psi jumps where the hazard does
    ref, _err = quad(lambda u: float(shift(rating, u)), 0.0, 12.0, points=knots, epsabs=1e-14, limit=200)
    assert float(shift_integral(rating, 12.0)) == pytest.approx(ref, rel=1e-10)


# --------------------------------------------------------------------------- simulation


def test_scheme_bias_annual_versus_monthly(capsys) -> None:
    """Bias of the 10-year credit factor E[exp(-L int y)] against the closed form, with common
    random numbers (the annual normal is the scaled sum of the twelve monthly ones)."""
    n, years = 100_000, 10
    times = np.arange(years + 1.0)
    loss = 1.0 - RECOVERY
    lines = []
    for params, bound_annual, bound_monthly, seed in [
        (IG, BIAS_BP_ANNUAL_IG, BIAS_BP_MONTHLY_IG, 11),
        (NON_FELLER, BIAS_BP_ANNUAL_NON_FELLER, BIAS_BP_MONTHLY_NON_FELLER, 12),
    ]:
        model = CirCreditModel(ratings=(_rating(params),), bond_maturities=(5.0,))
        z = np.random.default_rng(seed).standard_normal((years * 12, 1, n))
        z_annual = z.reshape(years, 12, 1, n).sum(axis=1) / np.sqrt(12.0)
        log_a, b = cir_laplace(params, loss, float(years))
        exact = float(np.exp(log_a - b * params.initial))  # CIR closed form (tested above)
        runs = [("annual", z_annual, 1, bound_annual), ("monthly", z, 12, bound_monthly)]
        for label, normals, sub, bound in runs:
            res = simulate_credit(
                model, times, normals, measure="market_consistent", n_paths=n, substeps=sub
            )
            mean, se = _mean_se(np.exp(-loss * res.integrated_factor[:, -1, 0]))
            bias_bp = -np.log(mean / exact) / years * 1e4  # as a bias of the 10y zero spread
            se_bp = se / mean / years * 1e4
            lines.append(
                f"feller={params.feller_ratio:.2f} {label}: bias {bias_bp:+.3f} bp (SE {se_bp:.3f} bp)"
            )
            assert abs(bias_bp) <= bound + 3.0 * se_bp, lines[-1]
    with capsys.disabled():
        print("\nfull-truncation Euler bias, 10y spread: " + "; ".join(lines))


def test_zero_volatility_simulation_is_the_market_hazard_curve() -> None:
    """nu -> 0 (limiting case): y is the deterministic CIR mean, so lambda = y + psi is the
    market hazard h(t) itself and int_0^t lambda = H(t) (the deterministic-intensity survival
    curve, common practice). The Euler drift has an O(h) error: with 1/400-year substeps it is
    below 1e-5 per year in the intensity and 1e-5 t in its integral."""
    p0 = CirParams(mean_reversion=0.4, long_run_mean=0.02, volatility=0.0, initial=0.012)
    rating = _rating(p0)
    model = CirCreditModel(ratings=(rating,), bond_maturities=(5.0,))
    times = np.arange(0.0, 12.75, 0.25)
    res = simulate_credit(
        model, times, np.random.default_rng(0), measure="market_consistent", n_paths=3, substeps=100
    )
    lam = res.columns[intensity_column("BBB")]
    cum = res.columns[cumulative_intensity_column("BBB")]
    assert np.max(np.abs(lam - _hazard().hazard(times)[None, :])) < 1e-5
    assert np.all(np.abs(cum - _hazard().integrated(times)[None, :]) <= 1e-5 * times[None, :])
    assert np.all(cum[:, 0] == 0.0)


def test_intensities_are_never_negative() -> None:
    # psi >= 0 here (market hazard above the CIR forward curve), so lambda = y^+ + psi >= 0; the
    # scheme truncates the factor (it does hit 0: Feller fails), never the intensity's sign.
    rating = _rating(NON_FELLER)
    assert float(np.min(shift(rating, np.linspace(0.0, 40.0, 4001)))) >= 0.0
    model = CirCreditModel(ratings=(rating,), bond_maturities=(1.0, 10.0))
    res = simulate_credit(
        model,
        np.arange(21.0),
        np.random.default_rng(5),
        measure="market_consistent",
        n_paths=4000,
        substeps=1,
    )
    lam = res.columns[intensity_column("BBB")]
    assert np.all(res.factor >= 0.0) and np.all(lam >= 0.0)
    assert np.mean(res.factor[:, 1:, 0] == 0.0) > 0.05  # the truncation does bind (test can fail)
    assert np.all(np.diff(res.columns[cumulative_intensity_column("BBB")], axis=1) >= 0.0)


def test_martingale_under_the_market_consistent_measure() -> None:
    """E_Q[exp(-L int_0^t lambda) Dbar(t, T) / B_t] = Dbar(0, T): under recovery of market value
    the pre-default price, discounted at the risk-free rate plus the loss rate, is a Q-martingale
    (Duffie and Singleton 1999); deterministic risk-free rates, B_t = 1 / P(0, t)."""
    curve = _flat_curve()
    rating = _rating()
    model = CirCreditModel(ratings=(rating,), bond_maturities=(3.0, 5.0))
    times = np.arange(6.0)
    n = 20_000
    res = simulate_credit(
        model,
        times,
        np.random.default_rng(7),
        measure="market_consistent",
        n_paths=n,
        substeps=12,
        risk_free=curve,
    )
    loss = rating.loss
    for m in (3.0, 5.0):
        for k in (2, 5):
            t = times[k]
            cum = res.columns[cumulative_intensity_column("BBB")][:, k]
            disc = np.exp(-loss * cum) * float(curve.discount(t))
            mean, se = _mean_se(disc * res.columns[dzcb_column("BBB", m)][:, k])
            exact = float(curve.discount(t + m) * credit_factor(rating, 0.0, t + m, IG.initial))
            bias = exact * BIAS_BP_MONTHLY_IG * 1e-4 * t  # stated bound, over the simulated part [0, t]
            assert abs(mean - exact) <= 3.0 * se + bias, (m, t, mean, exact, se)


def test_real_world_drift_and_density_reweighting() -> None:
    """The real-world set follows CIR(kappa^P, mu^P); its density dQ/dP reproduces the
    market-consistent set's expectations (exact for the scheme: no bias term), and the
    market-consistent set's dP/dQ reproduces the real-world closed form."""
    theta = price_of_risk_for_long_run_mean(
        IG.mean_reversion, IG.long_run_mean, IG.volatility, real_world_mean=0.014
    )
    rating = _rating(theta=theta)
    p_rw = real_world_cir(rating)
    assert p_rw.long_run_mean == pytest.approx(0.014, rel=1e-14)
    kappa_mu = IG.mean_reversion * IG.long_run_mean
    assert p_rw.mean_reversion * p_rw.long_run_mean == pytest.approx(kappa_mu, rel=1e-14)
    model = CirCreditModel(ratings=(rating,), bond_maturities=(5.0,))
    times = np.arange(9.0)
    n = 20_000
    rw = simulate_credit(
        model, times, np.random.default_rng(21), measure="real_world", n_paths=n, substeps=6
    )
    mc = simulate_credit(
        model, times, np.random.default_rng(22), measure="market_consistent", n_paths=n, substeps=6
    )
    cum = cumulative_intensity_column("BBB")
    for k in (3, 8):
        t = times[k]
        w_rw = rw.density[:, k]
        mean_w, se_w = _mean_se(w_rw)
        assert abs(mean_w - 1.0) <= 3.0 * se_w  # E_P[dQ/dP] = 1
        f_rw = np.exp(-rw.columns[cum][:, k])
        f_mc = np.exp(-mc.columns[cum][:, k])
        # P set reweighted vs the Q set: the same scheme, so no bias term.
        a, se_a = _mean_se(w_rw * f_rw)
        b, se_b = _mean_se(f_mc)
        assert abs(a - b) <= 3.0 * np.hypot(se_a, se_b), (t, a, b)
        # Q set reweighted by dP/dQ, and the P set itself, vs the real-world closed form.
        exact_p = float(survival_probability(rating, 0.0, t, IG.initial, measure="real_world"))
        bias = exact_p * 2.0 * BIAS_BP_MONTHLY_IG * 1e-4 * t  # bi-monthly substeps: twice the bound
        c, se_c = _mean_se(mc.density[:, k] * f_mc)
        assert abs(c - exact_p) <= 3.0 * se_c + bias, (t, c, exact_p)
        d, se_d = _mean_se(f_rw)
        assert abs(d - exact_p) <= 3.0 * se_d + bias, (t, d, exact_p)
        # and the real-world mean intensity factor follows the CIR mean with kappa^P, mu^P.
        mu_p, kappa_p = p_rw.long_run_mean, p_rw.mean_reversion
        mean_y = mu_p + (IG.initial - mu_p) * np.exp(-kappa_p * t)
        e, se_e = _mean_se(rw.factor[:, k, 0])
        assert abs(e - mean_y) <= 3.0 * se_e + 0.02 * mean_y * t / 8.0, (t, e, mean_y)  # Euler mean bias
    surv_p = survival_probability(rating, 0.0, 8.0, IG.initial, measure="real_world")
    assert surv_p > survival_probability(rating, 0.0, 8.0, IG.initial)  # theta < 0: fewer defaults


@pytest.mark.parametrize("measure", ["real_world", "market_consistent"])
def test_density_is_the_discrete_girsanov_ratio_of_the_same_normals(measure: str) -> None:
    """Deterministic check of the change of variable, with two correlated ratings: the other
    measure's chain driven by z' = z -/+ eta (eta = L^{-1} theta sqrt(y^+) sqrt(h), from the
    simulated path) reproduces the path exactly, and the log density is
    sum log phi(z') - log phi(z) (Glasserman 2004, §4.6; from memory)."""
    corr = np.array([[1.0, 0.6], [0.6, 1.0]])
    r1 = _rating(NON_FELLER, theta=-1.0, name="A")
    r2 = _rating(IG, theta=-2.0, name="BB")
    model = CirCreditModel(ratings=(r1, r2), bond_maturities=(2.0,), correlation=corr)
    times = np.array([0.0, 0.5, 1.0, 2.0])
    n, sub = 500, 4
    z = np.random.default_rng(3).standard_normal((3 * sub, 2, n))
    res = simulate_credit(model, times, z, measure=measure, n_paths=n, substeps=sub)
    # Rebuild the path step by step to get eta, then map the normals to the other measure.
    chol = np.linalg.cholesky(corr)
    theta = np.array([-1.0, -2.0])
    kappa = np.array([0.4, 0.4])[:, None]
    kappa_p = np.array(
        [real_world_square_root_drift(0.4, 0.02, v, t)[0] for v, t in [(0.25, -1.0), (0.12, -2.0)]]
    )[:, None]
    nu = np.array([0.25, 0.12])[:, None]
    x = np.full((2, n), 0.012)
    z_other = np.empty_like(z)
    log_ratio = np.zeros(n)
    j = 0
    for k in range(3):
        h = (times[k + 1] - times[k]) / sub
        for _ in range(sub):
            yp = np.maximum(x, 0.0)
            eta = np.linalg.solve(chol, theta[:, None] * np.sqrt(yp) * np.sqrt(h))
            zk = z[j]
            z_other[j] = zk + eta if measure == "real_world" else zk - eta
            log_ratio += -0.5 * np.sum(z_other[j] ** 2 - zk**2, axis=0)
            km = kappa_p if measure == "real_world" else kappa
            x = x + (0.4 * 0.02 - km * yp) * h + nu * np.sqrt(yp * h) * (chol @ zk)
            j += 1
    other = "market_consistent" if measure == "real_world" else "real_world"
    twin = simulate_credit(model, times, z_other, measure=other, n_paths=n, substeps=sub)
    np.testing.assert_allclose(twin.factor, res.factor, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(np.log(res.density[:, -1]), log_ratio, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(np.log(twin.density[:, -1]), -log_ratio, rtol=1e-10, atol=1e-12)


def test_columns_and_rates_coupling() -> None:
    rating = _rating()
    model = CirCreditModel(ratings=(rating,), bond_maturities=(1.0, 7.0))
    curve = _flat_curve(0.025)
    times = np.arange(4.0)
    res = simulate_credit(
        model,
        times,
        np.random.default_rng(1),
        measure="market_consistent",
        n_paths=50,
        substeps=2,
        risk_free=curve,
    )
    assert set(res.columns) == set(model.column_names())
    assert set(model.column_units()) == set(model.column_names())
    for m in (1.0, 7.0):
        dz = res.columns[dzcb_column("BBB", m)]
        s = res.columns[spread_column("BBB", m)]
        p = curve.discount(times + m) / curve.discount(times)
        np.testing.assert_allclose(dz, p[None, :] * np.exp(-m * s), rtol=1e-14)  # definition of s
        # time 0: the market's defaultable bond exactly.
        market = float(curve.discount(m)) * float(np.exp(-rating.loss * _hazard().integrated(m)))
        assert dz[0, 0] == pytest.approx(market, rel=1e-13)
    # an independent simulated rates set (any zcb columns): the product of the two factors.
    zcb = {f"zcb_{m:g}y": np.full((50, 4), 0.9 - 0.01 * m) for m in (1.0, 7.0)}
    coupled = defaultable_bond_columns(model, res.columns, zcb)
    np.testing.assert_allclose(
        coupled[dzcb_column("BBB", 7.0)],
        0.83 * np.exp(-7.0 * res.columns[spread_column("BBB", 7.0)]),
        rtol=1e-14,
    )
    assert np.all(res.density == 1.0)  # theta = 0: the two measures agree


def test_bad_inputs_are_refused() -> None:
    with pytest.raises(ValueError, match="mean reversion"):
        CirParams(mean_reversion=0.0, long_run_mean=0.02, volatility=0.1, initial=0.01)
    with pytest.raises(ValueError, match="real-world mean reversion"):
        _rating(theta=10.0)  # kappa - nu theta = 0.4 - 1.2 < 0
    with pytest.raises(ValueError, match="rating name"):
        _rating(name="B B")
    with pytest.raises(ValueError, match="recovery"):
        _rating(recovery=1.0)
    with pytest.raises(ValueError, match="unique"):
        CirCreditModel(ratings=(_rating(), _rating()), bond_maturities=(1.0,))
    with pytest.raises(Exception, match="positive semi-definite"):
        CirCreditModel(
            ratings=(_rating(name="A"), _rating(name="B"), _rating(name="C")),
            bond_maturities=(1.0,),
            correlation=np.array([[1.0, 0.9, -0.9], [0.9, 1.0, 0.9], [-0.9, 0.9, 1.0]]),
        )
    model = CirCreditModel(ratings=(_rating(),), bond_maturities=(1.0,))
    with pytest.raises(ValueError, match="normals must have shape"):
        simulate_credit(
            model, np.arange(3.0), np.zeros((3, 1, 10)), measure="real_world", n_paths=10, substeps=1
        )
    with pytest.raises(ValueError, match="unknown measure"):
        simulate_credit(
            model, np.arange(3.0), np.random.default_rng(0), measure="risk_neutral", n_paths=10, substeps=1
        )
