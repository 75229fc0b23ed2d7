"""The Solvency II review's curve method (last liquid forward rate) against the regulator's
demonstration workbook and the method's definition.

Sources named beside each check:
- [WB] EIOPA, demonstration workbook "RFR extrapolation and VA calculation" (19 May 2026), sheet
  "Input Data & Extrapolation", its example: par swap rates (annual coupons) at the liquid
  maturities 1-13, 15, 20, 25, 30, 40, 50 years, CRA 10 bp, UFR 3.3%, alpha 11%, LLFR weights
  20y 0.33, 25y 0.12, 30y 0.48, 40y 0.04, 50y 0.03; and the same rates read as government zero
  rates (instrument type GVT). The workbook's outputs (first smoothing point H13, LLFR L22, the
  bootstrapped continuous rates K25:K174, the basic risk-free rates L25:L174 rounded to 5
  decimals) as reproduced from the workbook in the open-source-modelling repository
  "EIOPA_constant_forward_methodology" (Output/swaps_curves.csv, Output/government_bonds_curves.csv
  and the LLFR values of its README, which states an exact match with the workbook recalculated
  by Excel). We could not open the .xlsm here; the numbers are in tests/data/llfr_workbook_example.csv.
- [TD] EIOPA RFR Technical Documentation EIOPA-BoS-26/198 (May 2026), section 8: the method's
  definition (constant forwards between liquid maturities, par pricing of every swap, the LLFR,
  the extrapolation formula); Table 4: alpha under the phasing-in, as quoted in the same
  repository's README (we could not open the PDF here).
"""

from __future__ import annotations

import csv
from decimal import ROUND_HALF_UP, Decimal
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad

from pqflow.errors import MarketDataError
from pqflow.market.data_files import read_curve_inputs
from pqflow.market.last_liquid_forward import (
    PHASE_IN_ALPHA,
    LastLiquidForwardCurve,
    bootstrap_constant_forward,
    convergence_alpha,
    fit_last_liquid_forward,
    periodic_par_swap_instruments,
)
from pqflow.market.serialize import curve_from_json, curve_to_json
from pqflow.market.smith_wilson import extrapolate_curve, par_swap_instruments, zero_coupon_instruments

DATA = Path(__file__).resolve().parent / "data" / "llfr_workbook_example.csv"
WB_UFR, WB_ALPHA, WB_CRA = 0.033, 0.11, 10.0
WB_LLFR_SWAPS = 0.03224887127830391  # [WB] L22, swaps
WB_LLFR_GOVT = 0.03188302797422029  # [WB] L22, instrument type GVT


def _workbook() -> dict[str, np.ndarray]:
    with DATA.open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    col = lambda name: np.array([float(r[name]) if r[name] != "" else np.nan for r in rows])  # noqa: E731
    return {name: col(name) for name in rows[0]}


def _excel_round(x: float, digits: int = 5) -> float:
    """The worksheet's ROUND: at 15 significant digits, halves away from zero (common practice
    for reproducing Excel; Python's round works on the binary value)."""
    return float(Decimal(f"{x:.15g}").quantize(Decimal(1).scaleb(-digits), rounding=ROUND_HALF_UP))


def _liquid(wb: dict[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    keep = wb["dlt"] == 1
    return wb["maturity_years"][keep], wb["input_rate"][keep], wb["llfr_weight"][keep]


@pytest.fixture(scope="module")
def wb() -> dict[str, np.ndarray]:
    return _workbook()


@pytest.mark.parametrize("kind", ["swap", "gvt"])
def test_workbook_example_fsp_llfr_and_every_published_rate(wb, kind):
    t, r, w = _liquid(wb)
    assert t.size == 19 and w.sum() == pytest.approx(1.0)
    if kind == "swap":
        inst = periodic_par_swap_instruments(t, r, coupon_frequency=1, credit_risk_adjustment_bp=WB_CRA)
        llfr = WB_LLFR_SWAPS
    else:
        inst = zero_coupon_instruments(t, r, credit_risk_adjustment_bp=WB_CRA)
        llfr = WB_LLFR_GOVT
    curve, report = fit_last_liquid_forward(inst, ufr=WB_UFR, llfr_weights=w, alpha=WB_ALPHA)
    # [WB] H13: the first smoothing point; L22: the LLFR (continuous), to floating-point accuracy.
    assert report.first_smoothing_point == 20.0
    assert report.last_liquid_forward_rate == pytest.approx(llfr, abs=1e-15)
    # [WB] K25:K74: the bootstrapped continuous zero rates at every whole year to the last liquid
    # maturity (50), constant forwards between the liquid maturities.
    knots, lgd = bootstrap_constant_forward(inst)
    years = np.arange(1.0, 51.0)
    ours = np.interp(years, np.concatenate(([0.0], knots)), np.concatenate(([0.0], lgd))) / years
    np.testing.assert_allclose(ours, wb[f"{kind}_bootstrapped_cc"][:50], rtol=0, atol=1e-14)
    # [WB] L25:L174: every published basic risk-free rate, 1..150 years, annually compounded,
    # rounded to 5 decimals.
    published = wb[f"{kind}_basic_rfr"]
    mine = curve.annual_zero_rate(np.arange(1.0, 151.0))
    rounded = np.array([_excel_round(x) for x in mine])
    assert np.array_equal(rounded, published), np.flatnonzero(rounded != published) + 1
    print(f"\n[{kind}] FSP {report.first_smoothing_point:g}, LLFR {report.last_liquid_forward_rate:.15f} "
          f"(workbook {llfr:.15f}); 150 of 150 basic rates equal to 5 decimals")


def test_workbook_example_through_the_curve_file_reader(wb, tmp_path):
    """The workbook's layout: every maturity listed, non-liquid rows without a rate (left out)."""
    t, r, w = _liquid(wb)
    lines = ["maturity_years,par_rate,llfr_weight"]
    liquid = dict(zip(t.tolist(), zip(r.tolist(), w.tolist(), strict=True), strict=True))
    for m in range(1, 151):
        rate, weight = liquid.get(float(m), ("", 0.0))
        lines.append(f"{m},{rate},{weight if weight else ''}")
    path = tmp_path / "curve.csv"
    path.write_text("\n".join(lines) + "\n")
    data = read_curve_inputs(path)
    np.testing.assert_array_equal(data.maturities, t)
    np.testing.assert_array_equal(data.llfr_weights, w)
    inst = periodic_par_swap_instruments(data.maturities, data.values, credit_risk_adjustment_bp=WB_CRA)
    curve, report = extrapolate_curve(inst, ufr=WB_UFR, method="last_liquid_forward", llfr_weights=data.llfr_weights)
    assert report.last_liquid_forward_rate == pytest.approx(WB_LLFR_SWAPS, abs=1e-15)  # [WB] L22


# -- the method's definition [TD] ---------------------------------------------------------------

RATES = np.array([0.021, 0.024, 0.026, 0.029, 0.031, 0.0325, 0.033, 0.032, 0.0305])
MATS = np.array([1.0, 2.0, 3.0, 5.0, 10.0, 20.0, 30.0, 40.0, 50.0])
WEIGHTS = np.array([0, 0, 0, 0, 0, 0.5, 0.3, 0.15, 0.05])


@pytest.mark.parametrize("freq", [1, 2, 4, 12])
def test_every_input_swap_prices_at_par_with_constant_periodic_forwards(freq):
    # [TD] 8.5.2: each swap, rate less CRA, values at par: (s - CRA)/m sum P(j/m) + P(T) = 1.
    cra = 30.0
    inst = periodic_par_swap_instruments(MATS, RATES, coupon_frequency=freq, credit_risk_adjustment_bp=cra)
    knots, lgd = bootstrap_constant_forward(inst)
    nodes, values = np.concatenate(([0.0], knots)), np.concatenate(([0.0], lgd))
    disc = lambda x: np.exp(-np.interp(x, nodes, values))  # noqa: E731
    for T, s in zip(MATS, RATES, strict=True):
        dates = np.arange(1, int(round(T * freq)) + 1) / freq
        value = (s - cra * 1e-4) / freq * disc(dates).sum() + disc(T)
        assert abs(value - 1.0) <= 1e-12, (freq, T, value)
    # the periodic forward is constant on each interval: equal ratios P(j/m)/P((j+1)/m) inside it
    grid = np.arange(0, int(MATS[-1] * freq) + 1) / freq
    growth = disc(grid[:-1]) / disc(grid[1:])
    for lo, hi in zip(np.concatenate(([0.0], MATS[:-1])), MATS, strict=True):
        inside = growth[(grid[:-1] >= lo - 1e-12) & (grid[1:] <= hi + 1e-12)]
        assert np.ptp(inside) < 1e-14
    # before the first maturity, the periodic forward is the first swap's periodic coupon [TD]
    assert growth[0] - 1.0 == pytest.approx((RATES[0] - cra * 1e-4) / freq, abs=1e-14)


def test_annual_periodic_swaps_are_the_smith_wilson_instruments():
    a = periodic_par_swap_instruments(MATS, RATES, coupon_frequency=1, credit_risk_adjustment_bp=5.0)
    b = par_swap_instruments(MATS, RATES, credit_risk_adjustment_bp=5.0)
    np.testing.assert_array_equal(a.cash_flows, b.cash_flows)
    np.testing.assert_array_equal(a.cash_flow_times, b.cash_flow_times)


def _fit(**kw):
    inst = periodic_par_swap_instruments(MATS, RATES, credit_risk_adjustment_bp=10.0)
    return fit_last_liquid_forward(inst, ufr=kw.pop("ufr", 0.036), llfr_weights=kw.pop("w", WEIGHTS), **kw)


def test_llfr_is_the_weighted_average_of_the_defined_forwards():
    curve, rep = _fit(alpha=0.11)
    knots, lgd = bootstrap_constant_forward(periodic_par_swap_instruments(MATS, RATES, credit_risk_adjustment_bp=10.0))
    L = dict(zip(knots.tolist(), lgd.tolist(), strict=True))
    # [TD] 8.5.6: one-year forward into the FSP (20): the constant forward on (10, 20] equals
    # (L(20) - L(19)), with L(19) on the line between L(10) and L(20).
    f_in = (L[20.0] - L[10.0]) / 10.0
    expected = (0.5 * f_in + 0.3 * (L[30.0] - L[20.0]) / 10 + 0.15 * (L[40.0] - L[20.0]) / 20
                + 0.05 * (L[50.0] - L[20.0]) / 30)
    assert rep.first_smoothing_point == 20.0
    assert rep.last_liquid_forward_rate == pytest.approx(expected, abs=1e-15)
    # up to the FSP the curve is the bootstrapped one; beyond it, the inputs enter only via the LLFR
    np.testing.assert_allclose(curve.log_discount(knots[knots <= 20]), lgd[knots <= 20], atol=1e-15)


def test_extrapolation_closed_forms_and_limits():
    curve, rep = _fit(alpha=0.11)
    tf, llfr, omega, a = 20.0, rep.last_liquid_forward_rate, np.log1p(0.036), 0.11
    z_f = float(curve.zero_rate(tf))
    for h in (0.5, 1.0, 7.0, 30.0, 130.0):
        # [TD] 8.5.5/8.5.7: f(tF, tF+h) = omega + (LLFR - omega)(1 - e^{-ah})/(ah) is the average
        # of the instantaneous forward over (tF, tF+h): the integral, by quadrature.
        avg = omega + (llfr - omega) * (1 - np.exp(-a * h)) / (a * h)
        integral, _ = quad(lambda x: float(curve.forward(x)), tf, tf + h, epsabs=1e-14, epsrel=1e-13)
        assert integral / h == pytest.approx(avg, abs=1e-12)
        # z(tF+h) = (tF z(tF) + h f(tF, tF+h)) / (tF + h)
        assert float(curve.zero_rate(tf + h)) == pytest.approx((tf * z_f + h * avg) / (tf + h), abs=1e-15)
    # the forward starts at the LLFR and tends to omega (h -> infinity)
    assert float(curve.forward(tf + 1e-12)) == pytest.approx(llfr, abs=1e-12)
    assert abs(float(curve.forward(150.0)) - omega) < abs(llfr - omega) * np.exp(-a * 129)
    # alpha -> infinity: the forward is at the UFR as soon as the FSP is passed
    fast, _ = _fit(alpha=1e6)
    assert float(fast.forward(tf + 1.0)) == pytest.approx(omega, abs=1e-15)
    assert (float(fast.log_discount(tf + 10)) - float(fast.log_discount(tf + 1))) / 9 == pytest.approx(omega, abs=1e-12)


def test_a_flat_curve_at_the_ufr_stays_flat():
    # [TD]: with every input rate equal to the UFR, every forward is ln(1+UFR), so is the LLFR.
    ufr = 0.033
    for inst in (zero_coupon_instruments(MATS, np.full(MATS.size, ufr)),
                 periodic_par_swap_instruments(MATS, np.full(MATS.size, ufr))):
        curve, rep = fit_last_liquid_forward(inst, ufr=ufr, llfr_weights=WEIGHTS, alpha=0.11)
        assert rep.last_liquid_forward_rate == pytest.approx(np.log1p(ufr), abs=1e-14)
        np.testing.assert_allclose(curve.annual_zero_rate(np.arange(1.0, 151.0)), ufr, atol=1e-14)


def test_government_zero_rates_reproduce_the_inputs_less_the_cra():
    # [TD] 8.5.2 (zero rates): z_k = ln(1 + r_k - CRA), constant continuous forward in between.
    inst = zero_coupon_instruments(MATS, RATES, credit_risk_adjustment_bp=10.0)
    curve, rep = fit_last_liquid_forward(inst, ufr=0.036, llfr_weights=WEIGHTS)
    up_to = MATS <= 20
    np.testing.assert_allclose(curve.annual_zero_rate(MATS[up_to]), RATES[up_to] - 0.001, atol=1e-15)
    # flat before the first maturity; between 3 and 5, L(4) is the mid-point of L(3), L(5)
    assert float(curve.zero_rate(0.5)) == pytest.approx(np.log(1 + RATES[0] - 0.001), abs=1e-15)
    assert float(curve.log_discount(4.0)) == pytest.approx(0.5 * (3 * np.log(1.025) + 5 * np.log(1.028)), abs=1e-15)
    assert rep.input_kind == "zero_rate"


def test_convergence_parameter_and_phase_in_table():
    # [TD] 8.5.8: 11% for all currencies but the Swedish krona, 40% for it.
    assert convergence_alpha() == (0.11, "all currencies but the Swedish krona")
    assert convergence_alpha(currency="SEK")[0] == 0.40
    assert convergence_alpha(alpha=0.2)[0] == 0.2
    # [TD] Table 4 (phasing-in): (other currencies, krona) by year.
    table = {2027: (0.200, 0.70), 2028: (0.182, 0.64), 2029: (0.164, 0.58), 2030: (0.146, 0.52),
             2031: (0.128, 0.46), 2032: (0.110, 0.40)}
    for year, (other, krona) in table.items():
        assert convergence_alpha(phase_in_year=year)[0] == pytest.approx(other, abs=1e-15)
        assert convergence_alpha(phase_in_year=year, currency="sek")[0] == pytest.approx(krona, abs=1e-15)
    assert PHASE_IN_ALPHA == table
    assert convergence_alpha(phase_in_year=2040)[0] == 0.11  # the final value from 2032 on
    with pytest.raises(ValueError, match="starts in 2027"):
        convergence_alpha(phase_in_year=2026)
    with pytest.raises(ValueError, match="not both"):
        convergence_alpha(alpha=0.1, phase_in_year=2028)
    _, rep = _fit(phase_in_year=2027)
    assert rep.alpha == 0.2 and "2027" in rep.alpha_source


def test_stored_curve_is_rebuilt_exactly():
    curve, _ = _fit()
    again = curve_from_json(curve_to_json(curve))
    assert isinstance(again, LastLiquidForwardCurve)
    t = np.linspace(0.0, 150.0, 601)
    np.testing.assert_array_equal(again.discount(t), curve.discount(t))
    np.testing.assert_array_equal(again.forward(t), curve.forward(t))


# -- bad inputs refused, naming the file and row ------------------------------------------------

def _curve_file(tmp_path: Path, rows: list[str], header: str = "maturity_years,par_rate,llfr_weight") -> Path:
    path = tmp_path / "curve.csv"
    path.write_text("\n".join([header, *rows]) + "\n")
    return path


GOOD = ["1,0.02,", "5,0.025,", "10,0.03,", "20,0.031,0.6", "30,0.031,0.4"]


@pytest.mark.parametrize(
    "rows, message",
    [
        (["1,0.02,", "5,0.025,", "10,0.03,", "20,0.031,0.6", "30,0.031,0.5"],
         r"weights sum to 1\.1, not 1 \(data row 4 \(line 5\): maturity 20, weight 0\.6; data row 5"),
        (["1,0.02,", "5,0.025,0", "10,0.03,", "20,0.031,", "30,0.031,"], "no row has a positive weight"),
        (["1,0.02,", "5,0.025,", "10,0.03,-0.1", "20,0.031,0.7", "30,0.031,0.4"],
         r"data row 3 \(line 4\), column 'llfr_weight': weight -0\.1 must not be negative"),
        (["1,0.02,", "5,0.025,", "10,0.03,", "20,0.031,0.6", "30,,0.4"],
         r"data row 5 \(line 6\), column 'llfr_weight': maturity 30 has a weight \(0\.4\) but no rate"),
        (["1,0.02,", "5,0.025,", "10,0.03,abc", "20,0.031,0.6", "30,0.031,0.4"],
         r"data row 3 \(line 4\), column 'llfr_weight': 'abc' is not a number"),
        (["0.5,0.02,0.5", "5,0.025,", "10,0.03,", "20,0.031,0.5", "zero"],
         r"data row 1 \(line 2\), column 'llfr_weight': the first smoothing point 0\.5"),
    ],
    ids=["sum", "no-positive", "negative", "weight-without-rate", "not-a-number", "fsp-below-1y"],
)
def test_bad_weights_are_refused_with_the_row_named(tmp_path, rows, message):
    header = "maturity_years,par_rate,llfr_weight"
    if rows[-1] == "zero":
        rows, header = rows[:-1], "maturity_years,zero_rate,llfr_weight"
    with pytest.raises(MarketDataError, match=message) as err:
        read_curve_inputs(_curve_file(tmp_path, rows, header=header))
    assert str(tmp_path / "curve.csv") in str(err.value)


def test_good_weights_read_and_empty_cells_count_as_zero(tmp_path):
    data = read_curve_inputs(_curve_file(tmp_path, GOOD))
    np.testing.assert_array_equal(data.llfr_weights, [0, 0, 0, 0.6, 0.4])
    # without the column an empty rate is still a missing value (Smith-Wilson files unchanged)
    with pytest.raises(MarketDataError, match="missing value"):
        read_curve_inputs(_curve_file(tmp_path, ["1,0.02", "5,"], header="maturity_years,par_rate"))


def test_fit_refuses_bad_weights_directly():
    inst = periodic_par_swap_instruments(MATS, RATES)
    with pytest.raises(MarketDataError, match="sum to 0.9"):
        fit_last_liquid_forward(inst, ufr=0.03, llfr_weights=WEIGHTS * 0.9)
    with pytest.raises(MarketDataError, match="no maturity has a positive weight"):
        fit_last_liquid_forward(inst, ufr=0.03, llfr_weights=np.zeros(MATS.size))
    with pytest.raises(MarketDataError, match="weight -0.5 at maturity 20"):
        fit_last_liquid_forward(inst, ufr=0.03, llfr_weights=np.array([0, 0, 0, 0, 0, -0.5, 1.5, 0, 0]))
    with pytest.raises(MarketDataError, match="one weight per liquid maturity"):
        fit_last_liquid_forward(inst, ufr=0.03, llfr_weights=WEIGHTS[:-1])
