"""Heston stochastic variance for an equity or property index: parameters, characteristic
function and semi-closed-form European option prices, with deterministic, Hull-White or G2++
rates.

Model under the market-consistent measure (Heston, "A closed-form solution for options with
stochastic volatility with applications to bond and currency options", *Review of Financial
Studies* 6 (1993)):

    dS_t / S_t = (r_t - q) dt + sqrt(v_t) dZ_t,
    dv_t = kappa (theta - v_t) dt + xi sqrt(v_t) dW^v_t,     dZ dW^v = rho dt,

with the short rate ``r`` from Hull-White or G2++. The variance driver ``W^v`` is taken
uncorrelated with the rate drivers (the rates-variance correlation is fixed at zero: it keeps
the variance a Heston process under every forward measure, which the prices below use).

**Characteristic function** of ``X = ln(F_T / F_0)``, ``F_t`` the forward price of the price
index for delivery at ``T`` (a martingale under the ``T``-forward measure), with deterministic
rates, in the "little trap" form of Albrecher, Mayer, Schoutens and Tistaert, "The little
Heston trap", *Wilmott Magazine* (2007), which has no branch-cut discontinuity of the complex
logarithm:

    b = kappa - rho xi i u,    d = sqrt(b^2 + xi^2 (i u + u^2)),    g = (b - d) / (b + d),
    C(u, T) = kappa theta / xi^2 [(b - d) T - 2 ln((1 - g e^{-dT}) / (1 - g))],
    D(u, T) = (b - d) / xi^2 (1 - e^{-dT}) / (1 - g e^{-dT}),
    E[e^{i u X}] = exp(C + D v_0).

**Stochastic rates.** Under the ``T``-forward measure the martingale part of ``d ln F_t`` is
``sqrt(v) dZ + sum_k s_k B_k(T - t) dW_k`` (Hull-White: one term ``sigma B_a``; G2++: two,
``sigma B_a`` and ``eta B_b``; see :mod:`pqflow.calibration.equity_vol`). The change from the
market-consistent to the forward measure shifts only the rate drivers, and ``W^v`` is
uncorrelated with them, so ``v`` keeps its Heston dynamics. The quadratic variation of
``ln F`` is ``v + 2 sqrt(v) c(t) + V'(t)``, ``c(t) = sum_k rho_kS s_k B_k(T - t)``. Hence:

* equity uncorrelated with the rate drivers (``c = 0``): exact, ``ln F_T`` is the Heston
  variable plus an independent Gaussian of variance ``V(T)`` (the integrated rate variance):
  ``phi(u) = phi_Heston(u) exp(-(i u + u^2) V(T) / 2)`` (the model of QuantLib's
  ``AnalyticHestonHullWhiteEngine``, which assumes zero equity-rate correlation);
* correlated: the H1-HW approximation of Grzelak and Oosterlee, "On the Heston model with
  stochastic interest rates", *SIAM Journal on Financial Mathematics* 2 (2011): ``sqrt(v_t)``
  in the cross term is replaced by its expectation, which keeps the model affine:
  ``phi(u) = phi_Heston(u) exp(-(i u + u^2) [V(T) + 2 int_0^T c(t) E sqrt(v_t) dt] / 2)``.
  ``E sqrt(v_t)`` is computed exactly from the non-central chi-square law of ``v_t``
  (:func:`expected_sqrt_variance`) and the time integral by Gauss-Legendre quadrature. The
  approximation's error against Monte Carlo of the full model is measured in
  ``tests/test_heston_pricing.py`` and stated in the README.

**Negative rate term.** With a negative equity-rate correlation ``W(T)`` can be negative (the
cross term outweighs the rates' own variance, typically below 10-20 years). The H1-HW
characteristic function then grows like ``exp(u^2 |W| / 2)`` and is not integrable (QuantLib's
H1-HW engine refuses negative correlation for this reason). There pqflow keeps the first-order
term, ``phi_Heston(u) [1 - (i u + u^2) W / 2]``, i.e. ``C(W) = C_Heston + W K^2 C_KK / 2``
(the price's derivative in total variance, a second strike derivative); the neglected terms
are of order ``W^2``. The Monte Carlo test measures the result at negative correlation too.

**Prices** by Lewis's formula (Lewis, *Option Valuation under Stochastic Volatility*, 2000):

    call = P(0,T) [F - sqrt(F K) / pi int_0^inf Re(e^{-i u k} phi(u - i/2)) / (u^2 + 1/4) du],

``k = ln(K / F)``; the put by parity. At ``u - i/2`` the exponent's ``i w + w^2`` is the real
``u^2 + 1/4``, so the rate terms are real. The integral is taken by ``scipy.integrate.quad_vec``
for all options at once.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.integrate import quad_vec
from scipy.special import gammaln, hyp1f1

from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams, b_factor
from pqflow.models.rates import RatesModel

__all__ = [
    "HestonParams",
    "heston_log_cf",
    "expected_sqrt_variance",
    "rate_log_cf_variance",
    "heston_forward_option",
    "heston_option_price",
    "HestonPricesOfRisk",
    "HestonIndex",
    "real_world_log_excess_growth",
    "heston_indices_to_json",
]

_GAUSS_NODES = 64  # Gauss-Legendre nodes of the H1-HW time integral (smooth integrand)


@dataclass(frozen=True, kw_only=True)
class HestonParams:
    """Heston variance parameters: ``v0`` (initial variance), ``kappa`` (mean reversion per
    year), ``theta`` (long-run variance), ``xi`` (volatility of variance) and ``rho`` (the
    correlation of the index and variance shocks)."""

    v0: float
    kappa: float
    theta: float
    xi: float
    rho: float

    def __post_init__(self) -> None:
        for name in ("v0", "kappa", "theta", "xi", "rho"):
            if not np.isfinite(getattr(self, name)):
                raise ValueError(f"Heston parameter {name} must be a finite number")
        if not self.v0 > 0.0:
            raise ValueError(f"Heston v0 = {self.v0!r} must be positive")
        if not self.kappa > 0.0:
            raise ValueError(f"Heston kappa = {self.kappa!r} must be positive")
        if not self.theta > 0.0:
            raise ValueError(f"Heston theta = {self.theta!r} must be positive")
        if not self.xi > 0.0:
            raise ValueError(f"Heston xi = {self.xi!r} must be positive")
        if not -1.0 < self.rho < 1.0:
            raise ValueError(f"Heston rho = {self.rho!r} must lie strictly inside (-1, 1)")

    @property
    def feller_ratio(self) -> float:
        """``2 kappa theta / xi^2``: at least 1 means the variance never reaches zero (Feller's
        condition); below 1 it touches zero and the simulation's truncation matters more."""
        return 2.0 * self.kappa * self.theta / self.xi**2

    def as_dict(self) -> dict[str, float]:
        return {"v0": self.v0, "kappa": self.kappa, "theta": self.theta, "xi": self.xi, "rho": self.rho}


def heston_log_cf(p: HestonParams, u: np.ndarray | complex, expiry: np.ndarray | float) -> np.ndarray:
    """``ln E[exp(i u ln(F_T / F_0))]`` under deterministic rates (little-trap form, module
    docstring); ``u`` complex, ``u`` and ``expiry`` broadcast."""
    u = np.asarray(u, dtype=complex)
    t = np.asarray(expiry, dtype=float)
    iu = 1j * u
    b = p.kappa - p.rho * p.xi * iu
    d = np.sqrt(b * b + p.xi**2 * (iu + u * u))
    g = (b - d) / (b + d)
    e = np.exp(-d * t)
    c = p.kappa * p.theta / p.xi**2 * ((b - d) * t - 2.0 * np.log((1.0 - g * e) / (1.0 - g)))
    dd = (b - d) / p.xi**2 * (1.0 - e) / (1.0 - g * e)
    return c + dd * p.v0


def expected_sqrt_variance(p: HestonParams, t: np.ndarray | float) -> np.ndarray:
    """``E[sqrt(v_t)]`` from ``v_0``, exactly: ``v_t = c Y`` with ``Y`` non-central chi-square,
    ``delta = 4 kappa theta / xi^2`` degrees of freedom and non-centrality
    ``lam = 4 kappa v0 e^{-kappa t} / (xi^2 (1 - e^{-kappa t}))``, ``c = xi^2 (1 - e^{-kappa t})
    / (4 kappa)`` (Cox, Ingersoll and Ross 1985), and ``E sqrt(Y) = sqrt(2) Gamma((delta+1)/2) /
    Gamma(delta/2) 1F1(-1/2; delta/2; -lam/2)`` (the half moment of the non-central
    chi-square; Johnson, Kotz and Balakrishnan, *Continuous Univariate Distributions*, vol. 2,
    ch. 29). For large ``lam`` (short times) the asymptotic series of ``1F1`` is used
    (Abramowitz and Stegun 13.5.1), which tends to ``sqrt(v0 e^{-kappa t})``."""
    shape = np.shape(t)
    t = np.atleast_1d(np.asarray(t, dtype=float)).ravel()
    out = np.full(t.shape, np.sqrt(p.v0))
    pos = t > 0.0
    if not np.any(pos):
        return out.reshape(shape)
    tt = t[pos]
    one_minus = -np.expm1(-p.kappa * tt)
    c = p.xi**2 * one_minus / (4.0 * p.kappa)
    delta = 4.0 * p.kappa * p.theta / p.xi**2
    lam = 4.0 * p.kappa * p.v0 * np.exp(-p.kappa * tt) / (p.xi**2 * one_minus)
    x = lam / 2.0
    b = delta / 2.0
    ratio = np.exp(gammaln((delta + 1.0) / 2.0) - gammaln(b))
    big = x > 60.0
    val = np.empty_like(x)
    val[~big] = np.sqrt(2.0 * c[~big]) * ratio * hyp1f1(-0.5, b, -x[~big])
    if np.any(big):
        # 1F1(a; b; -x) ~ Gamma(b)/Gamma(b-a) x^{-a} sum_n (a)_n (1+a-b)_n / n! x^{-n}, a = -1/2
        xb = x[big]
        a = -0.5
        term = np.ones_like(xb)
        total = np.ones_like(xb)
        for n in range(12):
            term = term * (a + n) * (1.0 + a - b + n) / ((n + 1) * xb)
            total = total + term
        lead = np.exp(gammaln(b) - gammaln(b - a)) * np.sqrt(xb)
        val[big] = np.sqrt(2.0 * c[big]) * ratio * lead * total
    out[pos] = val
    return out.reshape(shape)


def _rate_loadings(rates: RatesModel, correlation) -> list[tuple[float, float]]:
    """``[(rho_kS s_k, a_k)]``: the equity-correlated loadings of ``ln F`` on the rate drivers."""
    return list(rates.equity_loadings(rates.equity_correlation(correlation, strict=None)))


def rate_log_cf_variance(
    p: HestonParams,
    rates: HullWhiteParams | G2PlusPlusParams | None,
    correlation,
    expiry: float,
    expected_sqrt=None,
) -> tuple[float, bool]:
    """``(W, exact)``: the rates' contribution to the characteristic exponent is
    ``-(i u + u^2) W / 2`` with ``W = V(T) + 2 int_0^T c(t) E sqrt(v_t) dt`` (module docstring);
    ``exact`` is True when the equity-rate correlation is zero (then ``W = V(T)`` exactly),
    False when H1-HW's approximation is used. ``rates=None``: deterministic rates, ``(0, True)``.
    ``expected_sqrt``: a function ``t -> E sqrt(v_t)`` in place of the exact
    :func:`expected_sqrt_variance` (to compare with implementations that approximate it)."""
    if rates is None:
        return 0.0, True
    t = float(expiry)
    total = float(rates.integrated_variance(t))
    loads = [(w, a) for w, a in _rate_loadings(rates, correlation) if w != 0.0]
    if not loads:
        return total, True
    x, wts = np.polynomial.legendre.leggauss(_GAUSS_NODES)
    s = 0.5 * t * (x + 1.0)
    es = expected_sqrt_variance(p, s) if expected_sqrt is None else np.asarray(expected_sqrt(s))
    kern = sum(w * b_factor(a, t - s) for w, a in loads)
    total += 2.0 * 0.5 * t * float(np.sum(wts * kern * es))
    return total, False


def heston_forward_option(
    p: HestonParams,
    *,
    forward: np.ndarray | float,
    strike: np.ndarray | float,
    expiry: np.ndarray | float,
    discount: np.ndarray | float = 1.0,
    rate_variance: np.ndarray | float = 0.0,
    kind: str | np.ndarray = "call",
    epsabs: float = 1e-13,
    epsrel: float = 1e-11,
) -> np.ndarray:
    """European options on the forward ``F`` paid at ``T``: ``discount * E^T[(F_T - K)^+]`` (or
    the put), by Lewis's integral of the Heston characteristic function times
    ``exp(-(i u + u^2) rate_variance / 2)`` (:func:`rate_log_cf_variance`). All array arguments
    broadcast together; ``kind`` is ``"call"``/``"put"`` or an array of them."""
    f, k, t, df, w, kd = np.broadcast_arrays(
        np.asarray(forward, dtype=float), np.asarray(strike, dtype=float),
        np.asarray(expiry, dtype=float), np.asarray(discount, dtype=float),
        np.asarray(rate_variance, dtype=float), np.asarray(kind, dtype=object),
    )
    if np.any(~(f > 0.0)) or np.any(~(k > 0.0)) or np.any(~(t > 0.0)):
        raise ValueError("forward, strike and expiry must be positive")
    bad = {str(x) for x in kd.ravel()} - {"call", "put"}
    if bad:
        raise ValueError(f"kind must be 'call' or 'put', not {sorted(bad)}")
    shape = f.shape
    f, k, t, df, w, kd = (z.ravel() for z in (f, k, t, df, w, kd))
    logm = np.log(k / f)

    neg = w < 0.0

    def integrand(u: float) -> np.ndarray:
        z = u - 0.5j
        a = 0.5 * (u * u + 0.25)
        heston = np.exp(heston_log_cf(p, z, t) - 1j * u * logm)
        # W < 0: the first-order term of exp(-a W) (module docstring, "Negative rate term")
        rate = np.where(neg, 1.0 - a * w, np.exp(-a * np.where(neg, 0.0, w)))
        return np.real(heston * rate) / (u * u + 0.25)

    integral, _ = quad_vec(integrand, 0.0, np.inf, epsabs=epsabs, epsrel=epsrel, limit=2000)
    call = f - np.sqrt(f * k) / np.pi * integral
    price = np.where(kd == "call", call, call - (f - k))
    return (df * price).reshape(shape)


def heston_option_price(
    p: HestonParams,
    *,
    level: float,
    dividend_yield: float,
    discount: np.ndarray | float,
    expiry: np.ndarray | float,
    strike: np.ndarray | float,
    kind: str | np.ndarray = "call",
    rates: HullWhiteParams | G2PlusPlusParams | None = None,
    correlation=0.0,
    expected_sqrt=None,
) -> np.ndarray:
    """European options on the price index ``S_T e^{-qT}`` paid at ``T``: the forward is
    ``S_0 e^{-qT} / P(0, T)`` with ``discount = P(0, T)``. ``rates`` ``None`` for deterministic
    rates, else Hull-White (``correlation`` one number) or G2++ (the pair); exact for zero
    correlation, H1-HW otherwise (module docstring)."""
    t, df = np.broadcast_arrays(np.asarray(expiry, dtype=float), np.asarray(discount, dtype=float))
    w = 0.0
    if rates is not None:
        w = np.vectorize(lambda tt: rate_log_cf_variance(p, rates, correlation, tt, expected_sqrt)[0])(t)
    fwd = level * np.exp(-dividend_yield * t) / df
    return heston_forward_option(
        p, forward=fwd, strike=strike, expiry=t, discount=df, rate_variance=w, kind=kind
    )


# --------------------------------------------------------------------------- simulation


@dataclass(frozen=True, kw_only=True)
class HestonPricesOfRisk:
    """``lambda_perp`` (``equity``) and ``lambda_B`` (``variance``): the prices of risk of the
    index's and the variance's own independent shocks, both multiplying ``sqrt(v)``, with the
    real-world ``kappa^P`` and ``theta^P`` they imply (:mod:`pqflow.measure.heston_density`,
    which derives them)."""

    equity: float
    variance: float
    kappa_real_world: float
    theta_real_world: float


@dataclass(frozen=True, kw_only=True)
class HestonIndex:
    """A total-return index with Heston variance, as a run simulates it.

    column: the index-level column it writes (as a deterministic-volatility index would);
    level, income_yield: today's level and dividend (or rental) yield; params: the
    market-consistent Heston parameters; prices_of_risk:
    :class:`pqflow.measure.heston_density.HestonPricesOfRisk`; loadings: ``(driver, beta_j)``,
    the index driver's projection on Gaussian drivers whose increments the economy's columns
    give (:mod:`pqflow.simulation.heston_part`), ``explained`` the projection's variance share;
    rates_correlation: the correlation with the rate driver (Hull-White; 0 under G2++), for the
    pricing formula; substeps_per_year: the scheme's substeps.
    """

    name: str
    column: str
    level: float
    income_yield: float
    params: HestonParams
    prices_of_risk: object
    loadings: tuple[tuple[str, float], ...]
    explained: float
    rates_correlation: float
    substeps_per_year: int

    def __post_init__(self) -> None:
        if not 0.0 <= self.explained < 1.0 - self.params.rho**2:
            raise ValueError(
                f"index {self.name}: the variance shock cannot have correlation {self.params.rho:g} with the index "
                f"and 0 with the other drivers when they explain {self.explained:.3g} of the index's variance "
                "(needs rho^2 + explained < 1)"
            )
        if self.substeps_per_year < 1:
            raise ValueError(f"index {self.name}: substeps_per_year must be at least 1")


def real_world_log_excess_growth(p: HestonParams, prices_of_risk, t: np.ndarray | float) -> np.ndarray:
    """``ln E^P[S_t / (S_0 B_t)]`` of a Heston index whose real-world premium is ``lambda_S v``
    (``lambda_S = prices_of_risk.equity``: an index without projection on Gaussian drivers; with
    one, the premium's ``sqrt(v) mu(t)`` term leaves the affine class and there is no closed
    form).

    Under P, ``S_t / (S_0 B_t) = exp(lambda_S int v) M_t`` with ``M = exp(int sqrt(v) dB_S -
    int v / 2)`` a P-martingale; under ``dR = M dP`` the variance driver gains the drift
    ``rho sqrt(v)`` (Girsanov), so ``v`` is CIR with ``k' = kappa^P - xi rho`` and
    ``k' theta' = kappa theta``, and the expectation is the CIR Laplace transform at the negative
    rate ``-lambda_S`` (Cox, Ingersoll and Ross 1985; the CIR bond price):
    ``ln A(t) - B(t) v0`` with ``h = sqrt(k'^2 - 2 lambda_S xi^2)``,
    ``B = -2 lambda_S (e^{ht} - 1) / (2h + (k' + h)(e^{ht} - 1))``,
    ``ln A = (2 kappa theta / xi^2) ln(2h e^{(k' + h) t / 2} / (2h + (k' + h)(e^{ht} - 1)))``.
    Raises ``ValueError`` when ``k'^2 <= 2 lambda_S xi^2`` (the expectation is infinite at some
    finite horizon: a premium this large is not a usable real-world model)."""
    t = np.asarray(t, dtype=float)
    lam = prices_of_risk.equity
    k1 = prices_of_risk.kappa_real_world - p.xi * p.rho
    disc = k1 * k1 - 2.0 * lam * p.xi**2
    if not (k1 > 0.0 and disc > 0.0):
        raise ValueError(
            f"the real-world expected growth of this Heston index is not finite (k' = {k1:.4g}, k'^2 - 2 lambda_S "
            f"xi^2 = {disc:.4g}): lower the equity premium or raise kappa"
        )
    h = np.sqrt(disc)
    em1 = np.expm1(h * t)
    den = 2.0 * h + (k1 + h) * em1
    b = -2.0 * lam * em1 / den
    log_a = (2.0 * p.kappa * p.theta / p.xi**2) * (np.log(2.0 * h) + 0.5 * (k1 + h) * t - np.log(den))
    return log_a - b * p.v0


def heston_indices_to_json(indices: dict[str, HestonIndex]) -> dict[str, Any]:
    """The ``calibration.json`` form of a run's Heston indices (``parameters.stochastic_volatility``)."""
    return {
        name: {"model": "heston", **h.params.as_dict(), "column": h.column, "level": h.level,
               "income_yield": h.income_yield, "prices_of_risk": dict(vars(h.prices_of_risk)),
               "loadings": [list(x) for x in h.loadings], "explained": h.explained,
               "rates_correlation": h.rates_correlation, "substeps_per_year": h.substeps_per_year}
        for name, h in indices.items()
    }
