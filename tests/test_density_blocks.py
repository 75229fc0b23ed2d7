"""Densities restricted to autonomous blocks of drivers (pqflow.measure.blocks).

Sources: the Girsanov exponent of a Brownian motion with constant drift (Cameron-Martin-
Girsanov; e.g. Shreve, *Stochastic Calculus for Finance II*, 2004, section 5.2, from memory):
for correlated drivers ``W`` with correlation ``R`` and prices of risk ``lambda`` the density of
Q against P on the drivers' own information at ``T`` is
``exp(-c.W^P_T - c.lambda T / 2)``, ``c = R^{-1} lambda``; the conditional-expectation property
of a density restricted to a sub-filtration (Jensen: its variance is never larger; common
practice); Kong (1992) for the effective sample size ``(sum w)^2 / sum w^2``.
"""

from __future__ import annotations

import numpy as np
import pytest

from pqflow.market.curve import LogDiscountCurve
from pqflow.measure.blocks import (
    DensityBlock,
    block_states,
    check_blocks,
    column_drivers,
    default_blocks,
    economy_structure,
    gaussian_block_coefficients,
    model_structure,
    smallest_block,
)
from pqflow.models.cir_credit import CirCreditModel, CirParams, CreditRating, HazardCurve
from pqflow.models.economy import EconomyModel, TotalReturnIndex
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams
from pqflow.simulation.credit import simulate_credit
from pqflow.simulation.engine import block_laws, grid_laws, simulate_batch, simulate_states, time_grid

PILLARS = np.arange(1, 80 * 12 + 1) / 12.0
_ZERO = 0.03 - 0.01 * (1 - np.exp(-PILLARS / 3)) / (PILLARS / 3)  # invented curve shape
CURVE = LogDiscountCurve(maturities=PILLARS, discount_factors=np.exp(-_ZERO * PILLARS))
HW = HullWhiteParams(mean_reversion=0.05, volatility=0.009)
R3 = np.array([[1.0, -0.2, 0.1], [-0.2, 1.0, 0.4], [0.1, 0.4, 1.0]])
LAM = {"rates": 0.3, "eq": 0.25, "pr": 0.3}
SIG_EQ, SIG_PR = 0.18, 0.12


def _model(prices=LAM) -> EconomyModel:
    return EconomyModel(
        curve=CURVE, rates=HW,
        parts=(TotalReturnIndex(name="eq", kind="equity", level=100.0, income_yield=0.0, volatility=SIG_EQ),
               TotalReturnIndex(name="pr", kind="property", level=80.0, income_yield=0.0, volatility=SIG_PR)),
        correlation=R3, prices_of_risk=prices, bond_maturities=(10.0,),
    )


def test_block_log_variance_is_the_closed_form_girsanov_exponent():
    """Constant prices of risk: the block density's log-variance at T is lambda_B^T R_BB^-1
    lambda_B T (Girsanov, source above) on any grid, the full one lambda^T R^-1 lambda T."""
    m = _model()
    for spy in (1, 12):
        t = time_grid(20.0, spy)
        laws = block_laws(m, t, [(0, 1), (0, 1, 2)])
        lam2 = np.array([LAM["rates"], LAM["eq"]])
        lam3 = np.array([LAM["rates"], LAM["eq"], LAM["pr"]])
        assert 2 * laws.half_sq_cum[-1, 0] == pytest.approx(LAM["rates"] ** 2 * 20.0, rel=1e-12)
        assert 2 * laws.half_sq_cum[-1, 1] == pytest.approx(lam2 @ np.linalg.solve(R3[:2, :2], lam2) * 20.0, rel=1e-12)
        assert 2 * grid_laws(m, t).half_sq_cum[-1] == pytest.approx(lam3 @ np.linalg.solve(R3, lam3) * 20.0, rel=1e-12)


def test_block_density_equals_the_girsanov_exponent_path_by_path():
    """Hull-White plus one index: the simulated log q_density of block (rates, eq) equals
    -c.W^P_T - c.lambda T / 2 with the drivers' paths recovered from the states
    (sigma W_r = y_x + a y_I; sigma_S W_S = y_S - y_I for the noise parts y), to rounding."""
    m = _model()
    t = time_grid(15.0, 1)
    rng = np.random.default_rng(11)
    sim = simulate_states(m, t, measure="real_world", n_paths=400, rng=rng, antithetic=False, block_rows=[(0, 1, 2)])
    y = sim.states - grid_laws(m, t).mean["real_world"].T[:, None, :]  # noise parts (d, n, n_times)
    a, s = HW.mean_reversion, HW.volatility
    w_r = (y[0] + a * y[1]) / s
    w_s = (y[2] - y[1]) / SIG_EQ
    lam = np.array([LAM["rates"], LAM["eq"]])
    c = np.linalg.solve(R3[:2, :2], lam)
    expected = -(c[0] * w_r + c[1] * w_s) - 0.5 * (c @ lam) * t[None, :]
    np.testing.assert_allclose(np.log(sim.block_density[0]), expected, rtol=0, atol=1e-9)


class _Normals:
    """A generator stand-in handing the engine pre-drawn normals block by block."""

    def __init__(self, z: np.ndarray) -> None:
        self.z, self.k = z, 0

    def standard_normal(self, out: np.ndarray) -> np.ndarray:
        b = out.shape[0]
        out[...] = self.z[self.k : self.k + b]
        self.k += b
        return out


def test_block_density_is_the_conditional_expectation_of_the_full_density():
    """E[Z | block's paths]: paths that share the block's normals and redraw the other driver's
    average the full density to the block density (within 4 standard errors, common practice).
    The block (rates, eq) holds the leading states, so its noise uses the leading normals."""
    m = _model()
    t = time_grid(8.0, 1)
    k, d, outer, inner = t.size - 1, 4, 12, 3000
    rng = np.random.default_rng(5)
    z = np.empty((k, d, outer * inner))
    z[:, :3, :] = np.repeat(rng.standard_normal((k, 3, outer)), inner, axis=2)
    z[:, 3, :] = rng.standard_normal((k, outer * inner))
    sim = simulate_states(m, t, measure="real_world", n_paths=outer * inner, rng=_Normals(z), antithetic=False,
                          block_rows=[(0, 1, 2)])
    full = sim.density[:, -1].reshape(outer, inner)
    block = sim.block_density[0, :, -1].reshape(outer, inner)
    assert np.all(block == block[:, :1])  # the block density depends on the block's normals only
    se = full.std(axis=1, ddof=1) / np.sqrt(inner)
    z_scores = (full.mean(axis=1) - block[:, 0]) / se
    assert np.all(np.abs(z_scores) < 4.0), z_scores


@pytest.mark.parametrize("measure", ["real_world", "market_consistent"])
def test_block_densities_have_mean_one_and_less_spread_than_the_full_density(measure):
    """E[w] = 1 for every block (4 SE on antithetic pairs), log-variance below the full
    density's, and effective sample size (Kong 1992) above it."""
    m = _model()
    t = time_grid(30.0, 1)
    cols = simulate_batch(m, t, measure=measure, n_paths=20_000, rng=np.random.default_rng(3), antithetic=True,
                          density_blocks={"rates": (0, 1), "rates_eq": (0, 1, 2)})
    full_name = "q_density" if measure == "real_world" else "p_density"
    full = cols[full_name][:, -1]
    for name in ("rates", "rates_eq"):
        w = cols[f"{full_name}_{name}"][:, -1]
        pairs = 0.5 * (w[0::2] + w[1::2])
        assert abs(pairs.mean() - 1.0) < 4 * pairs.std(ddof=1) / np.sqrt(pairs.size), name
        assert np.log(w).var() < np.log(full).var()
        assert w.sum() ** 2 / (w**2).sum() > full.sum() ** 2 / (full**2).sum()


def test_blocks_leave_the_full_density_and_every_column_unchanged():
    """Asking for blocks changes no bit of what was written before."""
    m = _model()
    t = time_grid(10.0, 4)
    plain = simulate_batch(m, t, measure="real_world", n_paths=64, rng=np.random.default_rng(2), antithetic=True)
    with_blocks = simulate_batch(m, t, measure="real_world", n_paths=64, rng=np.random.default_rng(2),
                                 antithetic=True, density_blocks={"rates": (0, 1), "all": (0, 1, 2, 3)})
    for c, v in plain.items():
        assert np.array_equal(v, with_blocks[c]), c
    assert np.array_equal(with_blocks["q_density_all"], plain["q_density"])  # a block of every state


def test_config_structure_matches_the_built_models_structure():
    """The structure blocks are checked against before fitting equals the built model's."""
    for rates, drivers, corr0 in (
        (HW, ("rates",), None),
        (G2PlusPlusParams(a=0.5, sigma=0.01, b=0.05, eta=0.008, rho=-0.6), ("rates_x", "rates_y"), -0.6),
    ):
        names = (*drivers, "eq", "pr")
        corr = np.eye(len(names))
        if corr0 is not None:
            corr[0, 1] = corr[1, 0] = corr0
        m = EconomyModel(
            curve=CURVE, rates=rates,
            parts=(TotalReturnIndex(name="eq", kind="equity", level=100.0, income_yield=0.0, volatility=0.2),
                   TotalReturnIndex(name="pr", kind="property", level=80.0, income_yield=0.0, volatility=0.1)),
            correlation=corr, prices_of_risk={}, bond_maturities=(),
        )
        built = model_structure(m.state_names, m.state_drivers(), m.step_laws(np.array([0.0, 1.0])).transition)
        named = economy_structure(drivers, [("eq", "equity_eq"), ("pr", "property_pr")], None, {})
        assert built == named


def test_blocks_that_are_not_autonomous_are_refused_naming_the_state():
    structure = economy_structure(("rates",), [("eq", "equity_eq")], ("real_rate", "inflation"), {"BBB": "credit_BBB"})
    with pytest.raises(ValueError, match=r"state 'log_equity_eq' of driver 'eq' also moves with driver\(s\) rates"):
        block_states(DensityBlock(name="eq_only", drivers=("eq",)), structure)
    with pytest.raises(ValueError,
                       match=r"state 'log_cpi' of driver 'inflation' also moves with driver\(s\) real_rate"):
        block_states(DensityBlock(name="x", drivers=("rates", "inflation")), structure)
    with pytest.raises(ValueError, match="unknown driver"):
        block_states(DensityBlock(name="x", drivers=("rates", "gold")), structure)
    # the real rate alone is autonomous (its factor reads only itself); a rating too
    assert block_states(DensityBlock(name="real", drivers=("real_rate",)), structure) == ("x_real",)
    assert block_states(DensityBlock(name="c", drivers=("credit_BBB",)), structure) == ("intensity_BBB",)
    blocks = default_blocks(("rates",), ["eq"], ("real_rate", "inflation"), {"BBB": "credit_BBB"})
    assert [b.name for b in blocks] == ["rates", "rates_eq", "rates_inflation", "credit_BBB"]
    check_blocks(blocks, structure)
    with pytest.raises(ValueError, match="repeated"):
        check_blocks((*blocks, blocks[0]), structure)


def test_smallest_block_and_column_drivers():
    blocks = {"rates": ("rates",), "rates_eq": ("rates", "eq"), "all": ("rates", "eq", "pr")}
    assert smallest_block(column_drivers("zcb_10y", ("rates",)), blocks) == "rates"
    assert smallest_block(column_drivers("equity_eq", ("rates",)), blocks) == "rates_eq"
    assert smallest_block(column_drivers("property_pr", ("rates",)), blocks) == "all"
    assert smallest_block(column_drivers("cpi", ("rates",), ("real_rate", "inflation")), blocks) is None
    assert column_drivers("dzcb_BBB_5y", ("rates",)) == {"rates", "credit_BBB"}


def test_gaussian_block_coefficients_reduce_to_the_full_density_for_every_state():
    """A block of every state: g = L^T Sigma^-1 m = L^-1 m (the full density's eta)."""
    m = _model()
    t = time_grid(5.0, 1)
    laws = grid_laws(m, t)
    shift = np.einsum("kij,kj->ki", laws.chol, laws.eta)
    g = gaussian_block_coefficients(laws.chol, shift, range(4))
    np.testing.assert_allclose(g, laws.eta, rtol=1e-10, atol=1e-14)


def test_credit_rating_density_is_its_marginal_chain_likelihood_ratio():
    """One rating's own density: mean 1 (4 SE), and equal to the joint credit density when the
    ratings are independent and only that rating is priced; with correlated ratings its
    log-variance is below the joint one."""
    flat = HazardCurve(knots=np.array([1.0, 30.0]), hazards=np.array([0.01, 0.01]))  # invented
    ratings = (
        CreditRating(name="AA", cir=CirParams(initial=0.004, mean_reversion=0.3, long_run_mean=0.006, volatility=0.05),
                     hazard=flat, recovery=0.4, price_of_risk=-1.5),
        CreditRating(name="BBB", cir=CirParams(initial=0.02, mean_reversion=0.25, long_run_mean=0.03, volatility=0.08),
                     hazard=flat, recovery=0.4, price_of_risk=-2.0),
    )
    t = time_grid(20.0, 1)
    corr = np.array([[1.0, 0.6], [0.6, 1.0]])
    model = CirCreditModel(ratings=ratings, bond_maturities=(), correlation=corr)
    paths = simulate_credit(model, t, np.random.default_rng(4), measure="real_world", n_paths=40_000, substeps=4)
    for r in range(2):
        w = paths.rating_density[r, :, -1]
        assert abs(w.mean() - 1.0) < 4 * w.std(ddof=1) / np.sqrt(w.size)
        assert np.log(w).var() < np.log(paths.density[:, -1]).var()
    solo = CirCreditModel(ratings=(ratings[1],), bond_maturities=(), correlation=None)
    one = simulate_credit(solo, t, np.random.default_rng(4), measure="market_consistent", n_paths=500, substeps=2)
    np.testing.assert_allclose(one.rating_density[0], one.density, rtol=1e-12)
