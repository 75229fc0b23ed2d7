"""Tests of a mean for deflated prices, density weights and wealth ratios, with their power.

Every quantity ``X`` judged here is positive and right-skewed, and its expectation is known
(today's price, 1 for a density). Two rules, chosen per cell (:func:`rule_for_asset`,
:func:`rule_for_density`), both on independent sampling units (an antithetic pair is ONE unit):

**Lognormal identity** (``test = "lognormal identity"``). In the Gaussian economy every
deflated traded asset ``D_t A_t`` (bonds, indices, CPI, real bonds, the deflator) and every
Gaussian density is exactly lognormal: ``L = log X`` is Gaussian. Then
``log E[X] = E[L] + Var(L) / 2`` (the lognormal mean identity ``E[e^L] = e^{mu + s^2/2}``), and
the test of ``E[X] = x0`` is the test of ``T = m1 + v / 2 - log x0 = 0``, with ``m1`` the mean
of ``L``, ``v`` its variance (``m2 - m1^2 + Var(m1)``: unbiased whether or not the paths are
antithetic pairs). Its standard error comes from the delta method on the sampling units: unit
``j`` with pair means ``ubar_j`` of ``L`` and ``q_j`` of ``L^2`` has influence
``(1 - m1)(ubar_j - m1) + (q_j - m2) / 2``. This is Cox's method for the lognormal mean (Land,
"An evaluation of approximate confidence interval estimation methods for lognormal means",
*Technometrics* 14 (1972); Zhou and Gao, "Confidence intervals for the log-normal mean",
*Statistics in Medicine* 16 (1997); both from memory) with the delta method (common practice).
The statistic is a smooth function of the Gaussian moments of ``L``, so it is nearly normal even
when ``X`` has huge skewness, and its standard error does not collapse with the sample's
largest values, which is what makes the plain t raise false alarms below the mean and the
skewness-corrected t unable to see a low mean (it is quadratic in the deviation; with skewness
above about 6.4 at 1,000 units its low side never reaches the family critical value).

**Robust t** (``test = "robust t"``). Quantities that are not lognormal by construction (the
credit claims and any density or deflator that carries the CIR credit density) and cells with a
non-positive value: the plain t of ``mean(X) - x0`` on sampling units, with the standard error
floored at the one a lognormal of the same log-variance would have,
``|mean| sqrt((exp(s_L^2) - 1) / n_units)`` (``s_L^2`` the sample variance of ``log X`` over
paths; for antithetic pairs the pair mean's standard error under that lognormal,
:attr:`CellMoments.lognormal_floor`; the floor is left out where a value is not positive). The
floor, evaluated at the larger of the sample mean and the hypothesised one, keeps the standard
error from shrinking when the sample happens to miss the rare large values (the plain t's low
false alarms).

**Power.** A cell is *inconclusive* when its test cannot detect a material deviation
(``delta``: 5% of today's price for a martingale cell, 10% for a density mean) with at least 50%
power at the family level: with a normal statistic and family critical value ``z_f``
(Bonferroni, :mod:`pqflow.validation.summary`), power is at least 50% exactly when
``effect / se >= z_f``. The effect on the statistic's scale is ``log(1 + delta)`` for the
lognormal identity (the harder side: ``|log(1 + delta)| < |log(1 - delta)|``) and
``delta`` (relative to ``x0``) for the robust t; ``se`` is the statistic's standard error
on the same scale (column ``statistic_se``).

Sizes and powers of both rules are measured in ``tests/test_mean_tests.py`` (printed in the
test output).

The moments are streamed part by part (:class:`CellMoments`): sums, never the arrays.
"""

from __future__ import annotations

from collections.abc import Collection, Iterable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from pqflow.errors import ConfigError
from pqflow.storage.calibration_sections import CreditRecord, HestonIndexRecord
from pqflow.storage.names import INDEX_KINDS, density_block_or_none, index_column

__all__ = [
    "LOGNORMAL",
    "ROBUST",
    "TESTS",
    "CellMoments",
    "MeanTest",
    "mean_test",
    "rule_for_asset",
    "rule_for_density",
    "credit_in_density",
    "stochastic_volatility_assets",
    "stochastic_volatility_drivers",
    "unmeasured_heston_drivers",
    "HESTON_MEASURED_SHIFT",
    "MARTINGALE_DEVIATION",
    "DENSITY_DEVIATION",
    "MIN_UNITS",
]

LOGNORMAL = "lognormal identity"
ROBUST = "robust t"
TESTS = (LOGNORMAL, ROBUST)
#: Fewest sampling units for which each rule's normal approximation holds its size (measured in
#: tests/test_mean_tests.py: families of 10 lognormal cells, nominal 1%; lognormal identity
#: 5% false alarms at 25 units, 1.3% at 100; robust t 8% at 50, 2.7% at 100, 2% at 200); a cell
#: with fewer units is not judged: it is inconclusive, never a pass or a fail.
MIN_UNITS = {"lognormal identity": 100, "robust t": 200}
MARTINGALE_DEVIATION = 0.05  # material deviation of a deflated price: 5% of today's price
DENSITY_DEVIATION = 0.10  # of a density mean: 10%
_CREDIT_ASSET_PREFIXES = ("dzcb_", "cumulative_intensity_")


@dataclass(frozen=True, kw_only=True)
class CellMoments:
    """Running moments of ``k`` cells over sampling units, mergeable part by part.

    Per unit the triple ``(xbar, ubar, q)``: the unit's mean of ``X``, of ``L - shift`` and of
    ``(L - shift)^2`` with ``L = log X`` (``shift`` per cell, fixed by the first part, keeps the
    sums well conditioned). count: units; paths: paths; mean: ``(3, k)``; comoment: sums of
    products of deviations ``(3, 3, k)`` (Chan, Golub and LeVeque's pairwise update);
    nonpositive: per cell, how many values were ``<= 0`` (their ``L`` is counted as 0 and the
    cell's log statistics are not used).
    """

    count: int
    paths: int
    shift: np.ndarray
    mean: np.ndarray
    comoment: np.ndarray
    nonpositive: np.ndarray

    @classmethod
    def of(cls, values: np.ndarray, antithetic: bool, shift: np.ndarray | None = None) -> CellMoments:
        """From paths ``(n_paths, k)``; antithetic pairs are rows ``(2j, 2j+1)``."""
        x = np.asarray(values, dtype=float)
        if x.ndim == 1:
            x = x[:, None]
        positive = x > 0.0
        log_x = np.log(np.where(positive, x, 1.0))
        if shift is None:
            n_pos = positive.sum(axis=0)
            shift = np.where(n_pos > 0, np.where(positive, log_x, 0.0).sum(axis=0) / np.maximum(n_pos, 1), 0.0)
        u = np.where(positive, log_x - shift, 0.0)
        q = u * u
        if antithetic:
            if x.shape[0] % 2:
                raise ValueError("antithetic set with an odd number of paths in a part")
            x_u, u_u, q_u = (0.5 * (a[0::2] + a[1::2]) for a in (x, u, q))
        else:
            x_u, u_u, q_u = x, u, q
        stacked = np.stack([x_u, u_u, q_u])  # (3, n_units, k)
        mean = stacked.mean(axis=1)
        dev = stacked - mean[:, None, :]
        comoment = np.einsum("anj,bnj->abj", dev, dev)
        return cls(count=int(x_u.shape[0]), paths=int(x.shape[0]), shift=np.asarray(shift, dtype=float),
                   mean=mean, comoment=comoment, nonpositive=(~positive).sum(axis=0))

    def merge(self, other: CellMoments | None) -> CellMoments:
        if other is None or other.count == 0:
            return self
        if not np.array_equal(self.shift, other.shift):
            raise ValueError("merge needs the same shift: pass the first part's shift to CellMoments.of")
        na, nb = self.count, other.count
        n = na + nb
        delta = other.mean - self.mean
        mean = self.mean + delta * (nb / n)
        comoment = self.comoment + other.comoment + np.einsum("aj,bj->abj", delta, delta) * (na * nb / n)
        return CellMoments(count=n, paths=self.paths + other.paths, shift=self.shift, mean=mean,
                           comoment=comoment, nonpositive=self.nonpositive + other.nonpositive)

    # ------------------------------------------------------------------ derived statistics

    def _cov(self, a: int, b: int) -> np.ndarray:
        """Sample covariance between unit means ``a`` and ``b`` (``n - 1``)."""
        return self.comoment[a, b] / max(self.count - 1, 1)

    @property
    def x_mean(self) -> np.ndarray:
        return self.mean[0]

    @property
    def x_std_error(self) -> np.ndarray:
        """Standard error of ``mean(X)`` from the units' sample variance."""
        if self.count < 2:
            return np.full_like(self.mean[0], np.nan)
        return np.sqrt(np.maximum(self._cov(0, 0), 0.0) / self.count)

    @property
    def log_variance(self) -> np.ndarray:
        """``v``: unbiased variance of ``L`` over paths, ``m2 - m1^2 + Var(m1)`` (any sampling
        units: ``E[m2 - m1^2] = s^2 - Var(m1)``)."""
        m1, m2 = self.mean[1], self.mean[2]
        var_m1 = self._cov(1, 1) / self.count if self.count > 1 else 0.0
        return np.maximum(m2 - m1 * m1 + var_m1, 0.0)

    @property
    def log_mean(self) -> np.ndarray:
        """Estimate of ``log E[X]`` by the lognormal identity, ``m1 + v / 2`` (+ shift)."""
        return self.shift + self.mean[1] + 0.5 * self.log_variance

    @property
    def log_mean_std_error(self) -> np.ndarray:
        """Delta-method standard error of :attr:`log_mean` from the units' influences
        ``(1 - m1)(ubar - m1) + (q - m2) / 2`` (with the shifted ``L``; the statistic is
        location-equivariant, so the shift changes nothing but rounding)."""
        if self.count < 2:
            return np.full_like(self.mean[0], np.nan)
        g = 1.0 - self.mean[1]
        var = g * g * self._cov(1, 1) + 0.25 * self._cov(2, 2) + g * self._cov(1, 2)
        return np.sqrt(np.maximum(var, 0.0) / self.count)

    @property
    def lognormal_floor(self) -> np.ndarray:
        """Standard error of ``mean(X)`` if ``X`` were lognormal with the sample's log-variance
        ``s^2``: ``|mean| sqrt((exp(s^2) - 1) / n)`` for independent paths; for antithetic pairs
        whose ``log X`` is ``mu +- g`` (a pair mean ``e^mu cosh g``, ``E cosh g = e^{s^2/2}``,
        ``E cosh^2 g = (1 + e^{2 s^2}) / 2``) ``|mean| (exp(s^2) - 1) / sqrt(2 exp(s^2) n)``,
        ``n`` the units; 0 where a value is not positive."""
        s2 = np.minimum(self.log_variance, 700.0)
        n = max(self.count, 1)
        if self.paths > self.count:  # antithetic pairs
            rel = np.expm1(s2) / np.sqrt(2.0 * np.exp(s2) * n)
        else:
            rel = np.sqrt(np.expm1(s2) / n)
        return np.where(self.nonpositive > 0, 0.0, np.abs(self.mean[0]) * rel)


@dataclass(frozen=True, kw_only=True)
class MeanTest:
    """The judged test of ``E[X] = reference`` per cell (arrays of the cells' shape).

    estimate, std_error: sample mean of ``X`` and its plain standard error; z_plain: the plain
    t; test: the rule used per cell; z_score: the judged statistic; statistic_se: its standard
    error on the relative scale (log-mean for the lognormal identity, ``se / reference`` for
    the robust t); material_effect: the material deviation on the same scale; log_mean: the
    lognormal-identity estimate of ``log E[X]`` (NaN where not positive).
    """

    estimate: np.ndarray
    std_error: np.ndarray
    z_plain: np.ndarray
    test: np.ndarray
    z_score: np.ndarray
    statistic_se: np.ndarray
    material_effect: np.ndarray
    log_mean: np.ndarray
    #: the statistic before the minimum-units rule (equal to ``z_score`` where the cell is judged)
    z_raw: np.ndarray | None = None


def mean_test(moments: CellMoments, reference: np.ndarray | float, rule: str | np.ndarray,
              *, deviation: float, not_judged: str | None = None) -> MeanTest:
    """Judge ``E[X] = reference`` per cell with ``rule`` (``LOGNORMAL`` or ``ROBUST``, one or
    per cell); a lognormal-identity cell with a non-positive value falls back to ``ROBUST``.
    ``deviation``: the material relative deviation (``MARTINGALE_DEVIATION`` or
    ``DENSITY_DEVIATION``). ``not_judged``: the reason every cell is left unjudged
    (inconclusive), e.g. data outside the range in which the rule's size is measured."""
    ref = np.broadcast_to(np.asarray(reference, dtype=float), moments.mean[0].shape)
    rules = np.broadcast_to(np.asarray(rule, dtype=object), ref.shape).copy()
    unknown = set(rules.tolist()) - set(TESTS)
    if unknown:
        raise ValueError(f"unknown test rule(s) {sorted(unknown)}; use {TESTS}")
    rules[(rules == LOGNORMAL) & (moments.nonpositive > 0)] = ROBUST
    est, se = moments.x_mean, moments.x_std_error
    diff = est - ref
    z_plain = np.where(se > 0, diff / np.where(se > 0, se, 1.0), 0.0)
    log_ok = moments.nonpositive == 0
    with np.errstate(divide="ignore", invalid="ignore"):
        t_stat = np.where(log_ok & (ref > 0), moments.log_mean - np.log(np.where(ref > 0, ref, 1.0)), np.nan)
    se_t = moments.log_mean_std_error * _null_variance_factor(moments, ref)
    # The floor is evaluated at the larger of the sample mean and the hypothesised one: a sample
    # that missed its rare large values has a low mean, and its floor must not fall with it.
    with np.errstate(divide="ignore", invalid="ignore"):
        lift = np.where(np.abs(est) > 0, np.maximum(np.abs(ref) / np.abs(est), 1.0), 1.0)
    se_robust = np.maximum(se, moments.lognormal_floor * lift)
    scale = np.maximum(np.abs(ref), 1e-300)
    lognormal = rules == LOGNORMAL
    # A quantity exact by construction has a standard error of rounding size: it is floored at
    # 1e-12 of the reference, so such a cell is judged on its rounding, not divided by it.
    floor = 1e-12
    z_log = t_stat / np.maximum(se_t, floor)
    rel_se_robust = se_robust / scale
    z_rob = diff / np.maximum(se_robust, floor * scale)
    z_score = np.where(lognormal, z_log, z_rob)
    z_raw = z_score
    statistic_se = np.where(lognormal, se_t, rel_se_robust)
    # too few sampling units for the normal approximation: not judged (inconclusive)
    few = np.where(lognormal, moments.count < MIN_UNITS[LOGNORMAL], moments.count < MIN_UNITS[ROBUST])
    if np.any(few):
        z_score = np.where(few, 0.0, z_score)
        statistic_se = np.where(few, np.inf, statistic_se)
        rules = np.where(few, np.char.add(rules.astype(str), f" (not judged: {moments.count} sampling units)"),
                         rules.astype(str)).astype(object)
    if not_judged:  # a rule whose size is not established for these data: inconclusive, never judged
        z_score = np.zeros_like(z_score)
        statistic_se = np.full_like(statistic_se, np.inf)
        rules = np.char.add(np.asarray(rules).astype(str), f" (not judged: {not_judged})").astype(object)
    return MeanTest(
        estimate=est,
        std_error=se,
        z_plain=z_plain,
        test=rules,
        z_score=z_score,
        z_raw=z_raw,
        statistic_se=statistic_se,
        material_effect=np.where(lognormal, np.log1p(deviation), deviation) * np.ones_like(ref),
        log_mean=np.where(log_ok, moments.log_mean, np.nan),
    )


def _null_variance_factor(moments: CellMoments, ref: np.ndarray) -> np.ndarray:
    """``sqrt(f(v0) / f(v))``, ``f(v) = v + v^2 / 2`` (the variance of the lognormal identity's
    influence for Gaussian ``L``), ``v`` the sample log-variance and
    ``v0 = max(v, 2 (log x0 - m1))`` the log-variance the hypothesis ``E[X] = x0`` implies given
    the sample's log-mean ``m1``. A sample that missed its spread has a low ``v``, hence a low
    estimate and, with the plain delta method, a low standard error too: its low side raised
    about twice the nominal false alarms at ``z = 3.29`` (measured in
    ``tests/test_mean_tests.py``). Evaluating the variance under the hypothesis, as a score
    test does (common practice), removes that; a sample above the hypothesis is unchanged."""
    v = moments.log_variance
    m1 = moments.shift + moments.mean[1]
    with np.errstate(divide="ignore", invalid="ignore"):
        v0 = np.maximum(v, 2.0 * (np.log(np.where(ref > 0, ref, 1.0)) - m1))
        factor = np.sqrt((v0 + 0.5 * v0 * v0) / (v + 0.5 * v * v))
    return np.where(np.isfinite(factor) & (v > 0), factor, 1.0)


def rule_for_asset(asset: str, *, measure: str, credit_density: bool, non_lognormal: Collection[str] = ()) -> str:
    """Which test judges a martingale cell: the robust t for the credit claims (their default
    losses ``exp(-L Lambda)`` are not lognormal), for the assets named in ``non_lognormal``
    (a stochastic-volatility index: :func:`stochastic_volatility_assets`) and for every
    real-world cell when the density carries the credit part (the deflator ``q_density / B``
    then is not lognormal); the lognormal identity otherwise (the Gaussian economy's deflated
    prices)."""
    if asset.startswith(_CREDIT_ASSET_PREFIXES) or asset in non_lognormal:
        return ROBUST
    if measure == "real_world" and credit_density:
        return ROBUST
    return LOGNORMAL


def rule_for_density(
    column: str,
    *,
    credit_density: bool,
    heston_drivers: Collection[str] = (),
    block_drivers: Collection[str] | None = None,
) -> str:
    """The full density (``q_density``, ``p_density``) is lognormal unless it carries the credit
    density or a Heston part (``heston_drivers``: the run's stochastic-volatility indices,
    :func:`stochastic_volatility_drivers`); a block column (``q_density_<block>``) is lognormal
    unless its block is a credit block (name starting with ``credit``) or holds a Heston driver
    (``block_drivers``: the block's drivers; not known: taken to hold one when the run has any).
    A Heston part makes ``log w`` a variance mixture of Gaussians: the lognormal identity's size
    on such densities is measured in ``tests/test_heston_density_rule.py`` (far above its level
    for an allowed house view), the robust t's is within it."""
    block = density_block_or_none(column)
    if block is not None:
        if block.startswith("credit"):
            return ROBUST
        if heston_drivers and (block_drivers is None or set(block_drivers) & set(heston_drivers)):
            return ROBUST
        return LOGNORMAL
    return ROBUST if credit_density or heston_drivers else LOGNORMAL


#: Largest relative shift of the real-world Heston mean reversion or long-run variance from the
#: market-consistent ones (``|kappa^P / kappa - 1|``, ``|theta^P / theta - 1|``) at which the
#: robust t's size on densities holding the Heston part is measured within its level
#: (tests/test_heston_density_rule.py: demo_smile fit 0 shift, 0.5% false alarms; a house-view
#: long-run volatility of 20% against 20.5%, shifts 5.4% and 5.1%: 1.0%; 19%, 17% and 14%: 3%,
#: beyond: 8% at 18%, 24.5% at 15%). Beyond it the cells are not judged (inconclusive).
HESTON_MEASURED_SHIFT = 0.06


def unmeasured_heston_drivers(heston: Mapping[str, HestonIndexRecord]) -> dict[str, str]:
    """The stochastic-volatility indices (``CalibrationRecord.stochastic_volatility``: the Heston
    entries by name) whose real-world variance dynamics lie beyond the range in which the density
    rule's size is measured (:data:`HESTON_MEASURED_SHIFT`), each with the reason printed beside
    its unjudged cells (an entry the file does not hold in full is left out)."""
    out: dict[str, str] = {}
    for name in heston:
        try:
            entry = heston[name]
            lam = entry.prices_of_risk
            shifts = [abs(lam.kappa_real_world / entry.kappa - 1.0), abs(lam.theta_real_world / entry.theta - 1.0)]
        except (ConfigError, ZeroDivisionError):
            continue
        if max(shifts) > HESTON_MEASURED_SHIFT:
            out[name] = (f"{name}: real-world kappa and theta {shifts[0]:.0%} and {shifts[1]:.0%} from the "
                         f"market-consistent ones, beyond the {HESTON_MEASURED_SHIFT:.0%} within which this "
                         "rule's size is measured")
    return out


def stochastic_volatility_drivers(heston: Mapping[str, Any]) -> frozenset[str]:
    """Names (drivers) of the indices that ``calibration.json`` gives a stochastic volatility
    (``CalibrationRecord.stochastic_volatility``): the densities that hold them carry a Heston part."""
    return frozenset(str(name) for name in heston)


def stochastic_volatility_assets(heston_indices: Iterable[str]) -> frozenset[str]:
    """Index columns (``equity_<name>``, ``property_<name>``) of the indices that
    ``calibration.json`` gives a stochastic volatility (the names of
    ``CalibrationRecord.stochastic_volatility``, the Heston indices). Their deflated values are
    variance mixtures of lognormals, not
    lognormal: ``log X`` is not Gaussian and the lognormal identity is biased upward for them
    (``E[L] + Var(L)/2 - log E[X] = Var(s^2)/8`` for ``X = exp(s Z - s^2/2)`` with a random
    ``s``), measured in ``tests/test_mean_tests.py``."""
    return frozenset(index_column(kind, str(name)) for name in heston_indices for kind in INDEX_KINDS)


def credit_in_density(credit: CreditRecord | None, column_names: list[str] | None = None) -> bool:
    """Whether the full density carries a CIR credit part: a rating with a non-zero price of
    risk in the credit part of ``calibration.json`` (``CalibrationRecord.credit``; or, without
    a readable record, credit columns in the files)."""
    if credit is not None:
        return credit.priced
    return any(c.startswith(("cumulative_intensity_", "intensity_")) for c in (column_names or []))
