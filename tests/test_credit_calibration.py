"""Credit calibration: hazard bootstrap from zero-coupon spreads, the exact CIR++ fit and the
loose fit of the CIR parameters.

References used below:
- The "credit triangle" ``h = s / (1 - R)`` for a flat spread curve (common practice); exact
  for a zero-coupon bond under recovery of market value (Duffie and Singleton, *Review of
  Financial Studies* 12 (1999)).
- QuantLib 1.44 ``ql.HazardRateCurve`` (piecewise-flat hazard) for the bootstrapped curve's
  survival probabilities.
- Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006, ch. 3.9
  (CIR++ reprices today's curve exactly); Brigo and Alfonsi, *Finance and Stochastics* 9
  (2005), the positivity condition ``psi >= 0`` for the shifted intensity.
- Market consistency by Monte Carlo (Society of Actuaries, *Economic Scenario Generators: A
  Practical Guide*, 2016, §8.3): the simulated set reprices the calibration instruments within
  its standard error plus the scheme bias bound stated in :mod:`pqflow.models.cir_credit`.

Monte Carlo tolerances: 3 standard errors, fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pytest
import QuantLib as ql

from pqflow.calibration.credit import (
    ZeroSpreadCurve,
    bootstrap_hazard_curve,
    calibrate_credit,
    calibrate_rating,
)
from pqflow.errors import CalibrationError, MarketDataError
from pqflow.models.cir_credit import (
    CirParams,
    cir_forward,
    shift,
    zero_spread,
)
from pqflow.simulation.credit import simulate_credit
from pqflow.storage.names import cumulative_intensity_column, dzcb_column

__all__: list[str] = []

TODAY = ql.Date(15, 1, 2025)
DAY_COUNT = ql.Actual365Fixed()

# Invented zero-coupon spread curves (decimals, continuously compounded); recovery 40%.
MATURITIES = np.array([1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0])
SPREADS = {
    "A": np.array([0.0040, 0.0048, 0.0055, 0.0066, 0.0075, 0.0085, 0.0094, 0.0099, 0.0102]),
    "BBB": np.array([0.0080, 0.0095, 0.0108, 0.0125, 0.0138, 0.0150, 0.0162, 0.0168, 0.0172]),
}
RECOVERY = 0.4
START = CirParams(mean_reversion=0.4, long_run_mean=0.02, volatility=0.12, initial=0.005)
FREE = ("mean_reversion", "long_run_mean", "initial")
BIAS_BP_MONTHLY = 0.5  # stated in pqflow.models.cir_credit (monthly substeps)


def _curve(rating: str = "BBB", recovery: float = RECOVERY) -> ZeroSpreadCurve:
    return ZeroSpreadCurve(rating=rating, maturities=MATURITIES, spreads=SPREADS[rating], recovery=recovery)


def test_flat_spreads_give_the_credit_triangle() -> None:
    curve = ZeroSpreadCurve(rating="BB", maturities=[1.0, 5.0, 10.0], spreads=[0.03] * 3, recovery=0.4)
    hazard = bootstrap_hazard_curve(curve)
    np.testing.assert_allclose(hazard.hazards, 0.03 / (1.0 - 0.4), rtol=1e-14)  # h = s / (1 - R)


def test_bootstrap_reprices_spreads_and_matches_quantlib_survival() -> None:
    curve = _curve()
    hazard = bootstrap_hazard_curve(curve)
    # Recovery of market value: s(T) T = (1 - R) H(T) at every pillar (exact).
    implied = (1.0 - RECOVERY) * hazard.integrated(MATURITIES) / MATURITIES
    np.testing.assert_allclose(implied, SPREADS["BBB"], rtol=1e-13)
    # The same hazards in QuantLib's piecewise-flat hazard curve give the same survival curve.
    saved = ql.Settings.instance().evaluationDate
    ql.Settings.instance().evaluationDate = TODAY
    try:
        days = (MATURITIES * 365).astype(int)
        dates = [TODAY] + [TODAY + int(d) for d in days]
        rates = [float(hazard.hazards[0])] + [float(h) for h in hazard.hazards]
        ref = ql.HazardRateCurve(dates, rates, DAY_COUNT)
        for d in (200, 365, 1000, 2555, 6000, 10950):
            t = d / 365.0
            assert float(hazard.survival(t)) == pytest.approx(ref.survivalProbability(t), rel=1e-13)
    finally:
        ql.Settings.instance().evaluationDate = saved


def test_bad_spread_inputs_are_refused() -> None:
    with pytest.raises(MarketDataError, match="decimal"):
        ZeroSpreadCurve(rating="BBB", maturities=[1.0, 2.0], spreads=[1.2, 1.5], recovery=0.4)  # percent
    with pytest.raises(MarketDataError, match="strictly increasing"):
        ZeroSpreadCurve(rating="BBB", maturities=[2.0, 1.0], spreads=[0.01, 0.01], recovery=0.4)
    with pytest.raises(MarketDataError, match="recovery"):
        ZeroSpreadCurve(rating="BBB", maturities=[1.0], spreads=[0.01], recovery=1.0)
    # s T falling with T would need a negative hazard: refused, naming the bucket.
    falling = ZeroSpreadCurve(
        rating="BBB", maturities=[1.0, 2.0, 3.0], spreads=[0.02, 0.015, 0.005], recovery=0.4
    )
    with pytest.raises(CalibrationError, match=r"negative hazard rate .* \(2y, 3y\]"):
        bootstrap_hazard_curve(falling)


def test_given_parameters_reprice_exactly_and_report() -> None:
    result = calibrate_rating(_curve(), cir=START)
    report = result.report
    assert report.fitted == () and report.message == "given"
    assert report.max_abs_error_bp < 1e-8  # CIR++ exact fit (Brigo and Mercurio 2006, ch. 3.9)
    for row in report.rows:
        assert row.model_spread == pytest.approx(row.market_spread, abs=1e-14)
    assert report.shift_nonnegative and report.min_shift >= 0.0
    assert report.feller_ratio == pytest.approx(2 * 0.4 * 0.02 / 0.12**2, rel=1e-14)
    # Spreads at other maturities follow the piecewise-flat hazard (convention of the bootstrap).
    hazard = bootstrap_hazard_curve(_curve())
    for t in (0.5, 4.0, 12.0, 40.0):
        assert float(zero_spread(result.rating, 0.0, t, START.initial)) == pytest.approx(
            (1.0 - RECOVERY) * float(hazard.integrated(t)) / t, rel=1e-12
        )


def test_negative_shift_is_refused_unless_allowed() -> None:
    too_high = CirParams(mean_reversion=0.4, long_run_mean=0.05, volatility=0.12, initial=0.02)
    with pytest.raises(CalibrationError, match="shift is negative"):
        calibrate_rating(_curve(), cir=too_high)
    result = calibrate_rating(_curve(), cir=too_high, allow_negative_shift=True)
    assert not result.report.shift_nonnegative and result.report.min_shift < 0.0
    assert result.report.max_abs_error_bp < 1e-8  # still exact: the shift absorbs everything


@pytest.mark.parametrize("rating", ["A", "BBB"])
def test_loose_fit_explains_the_curve_shape_with_a_nonnegative_shift(rating: str) -> None:
    curve = _curve(rating)
    given = calibrate_rating(curve, cir=START, allow_negative_shift=True).report
    fitted = calibrate_rating(curve, cir=START, fit=FREE)
    report = fitted.report
    assert report.fitted == FREE and report.optimizer_success
    assert report.params.volatility == START.volatility  # not freed: kept as given
    assert report.max_abs_error_bp < 1e-8  # exact repricing whatever the parameters
    # Brigo and Alfonsi (2005) positivity: psi >= 0, checked on a finer grid than the fit's.
    grid = np.linspace(0.0, 30.0, 3001)
    assert float(np.min(shift(fitted.rating, grid))) >= -1e-12
    # The CIR part now carries most of the hazard curve: the shift is small next to the hazard.
    hazard = bootstrap_hazard_curve(curve)
    assert report.rms_shift < given.rms_shift
    assert report.rms_shift < 0.25 * float(np.sqrt(np.mean(hazard.hazard(grid) ** 2)))
    # psi = h - f_L / L, so the CIR forward curve is below the market hazard everywhere.
    loss = 1.0 - RECOVERY
    assert np.all(cir_forward(report.params, loss, grid) / loss <= hazard.hazard(grid) + 1e-12)


def test_feller_requirement() -> None:
    low_mean = CirParams(mean_reversion=0.4, long_run_mean=0.005, volatility=0.12, initial=0.005)
    assert low_mean.feller_ratio < 1.0
    with pytest.raises(CalibrationError, match="Feller"):
        calibrate_rating(_curve(), cir=low_mean, require_feller=True)  # given parameters violate it
    fitted = calibrate_rating(_curve(), cir=low_mean, fit=FREE, require_feller=True)
    assert fitted.report.feller_ratio >= 1.0 - 1e-9  # 2 kappa mu >= nu^2 (Feller)
    assert fitted.report.shift_nonnegative and fitted.report.max_abs_error_bp < 1e-8
    # A volatility so high that Feller forces the CIR forward curve above the market hazard, so
    # psi >= 0 and Feller cannot both hold: with mu >= nu^2 / (2 kappa) and kappa <= 5 (the
    # fit's bound), f_L(inf) = 2 L kappa mu / (kappa + h) >= L nu^2 / (kappa + h) > L nu^2 / 11,
    # which for nu = 0.8 is 0.035 against L max h = 0.019 (CIR forward formula above).
    wild = CirParams(mean_reversion=0.4, long_run_mean=0.02, volatility=0.8, initial=0.005)
    with pytest.raises(CalibrationError, match="lower nu"):
        calibrate_rating(_curve(), cir=wild, fit=FREE, require_feller=True)


def test_calibrated_model_reprices_spreads_by_monte_carlo() -> None:
    """Market consistency (SOA 2016, §8.3): the simulated credit factor
    E_Q[exp(-L int_0^T lambda)] reprices exp(-s(T) T) within 3 SE plus the stated bias bound."""
    corr = np.array([[1.0, 0.8], [0.8, 1.0]])
    cal = calibrate_credit(
        [_curve("A"), _curve("BBB")],
        cir={"A": START, "BBB": START},
        fit=FREE,
        bond_maturities=(5.0,),
        correlation=corr,
        prices_of_risk={"BBB": -1.0},
    )
    assert [r.rating for r in cal.reports] == ["A", "BBB"]
    assert cal.model.names == ("A", "BBB")
    assert dzcb_column("BBB", 5.0) in cal.model.column_names()
    times = np.arange(11.0)
    n = 20_000
    res = simulate_credit(
        cal.model, times, np.random.default_rng(99), measure="market_consistent", n_paths=n, substeps=12
    )
    for rating in ("A", "BBB"):
        s_market = dict(zip(MATURITIES, SPREADS[rating], strict=True))
        for t in (3.0, 5.0, 10.0):
            v = np.exp(-(1.0 - RECOVERY) * res.columns[cumulative_intensity_column(rating)][:, int(t)])
            mean, se = float(v.mean()), float(v.std(ddof=1) / np.sqrt(n))
            exact = float(np.exp(-s_market[t] * t))
            bias = exact * BIAS_BP_MONTHLY * 1e-4 * t
            assert abs(mean - exact) <= 3.0 * se + bias, (rating, t, mean, exact, se)
    # Over one day the factors' increments are (to first order) the correlated shocks: their
    # sample correlation is the input one (sampling s.d. near 0.8 with n = 20000: about 0.0026).
    day = simulate_credit(cal.model, np.array([0.0, 1.0 / 365.0]), np.random.default_rng(98),
                          measure="market_consistent", n_paths=n, substeps=1)
    assert np.all(day.factor[:, 1, :] > 0.0)  # no truncation in the step
    rho = float(np.corrcoef((day.factor[:, 1, :] - day.factor[:, 0, :]).T)[0, 1])
    assert abs(rho - 0.8) < 4.0 * 0.0026


def test_calibrate_credit_checks_its_inputs() -> None:
    with pytest.raises(ValueError, match="no CIR parameters"):
        calibrate_credit([_curve("A")], cir={}, bond_maturities=(5.0,))
    with pytest.raises(ValueError, match="unknown ratings"):
        calibrate_credit(
            [_curve("A")], cir={"A": START}, bond_maturities=(5.0,), prices_of_risk={"AA": -1.0}
        )
    with pytest.raises(ValueError, match="cannot fit"):
        calibrate_rating(_curve(), cir=START, fit=("speed",))
