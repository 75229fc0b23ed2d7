"""Cash flows of each product on a batch of scenarios, at whole years.

Each function returns two arrays of shape ``(n_paths, J + 1)`` (``J`` the last year
projected), for all the model point's policies together:

* ``benefits``: every benefit paid (maturity, death and surrender benefits, annuity values at
  retirement), guaranteed and non-guaranteed parts together. Its value is the best estimate of
  the benefits; there are no further premiums, and expenses are not modelled.
* ``guarantee``: the part of the benefits that exists only because of the guarantee (the
  option's payoff). Its value is the cost of the guarantee.

Products (fields in ``pqflow.liabilities.portfolio``):

**Unit-linked with a guaranteed minimum maturity benefit.** Fund ``F_j = F_0 (S_j / S_0)
(1 - c)^j`` on the total-return index ``S`` with annual charge ``c``. Deaths and surrenders are
paid the fund; policies reaching maturity ``T`` get ``max(F_T, G_T)`` with
``G_T = G (1 + g)^T``; the guarantee pays ``max(G_T - F_T, 0)``.

**Participating with a guaranteed minimum crediting rate.** Fund return over year ``j``:
``R_j = w_e (S_j/S_{j-1} - 1) + w_b (P(j, j+m-1)/P(j-1, j-1+m) - 1) + w_c (B_j/B_{j-1} - 1)``
(equity, a bond fund rolling the ``m``-year zero bond, cash; rebalanced yearly). Optional
smoothing: ``R~_j = (1 - s) R_j + s R~_{j-1}``, ``R~_0`` given. The account is credited
``c_j = max(g, beta R~_j)`` each year, ``A_j = A_{j-1} (1 + c_j)``; exits and maturity pay the
account. The guarantee's payoff is the difference from the same account credited
``beta R~_j`` without the floor.

**Deferred annuity with a guaranteed annuity option (GAO).** At retirement ``T`` a policy
holds a sum ``K`` (fixed, or a unit-linked fund ``F_T``) and may take it in cash or as an
annuity of ``g`` per unit a year. The market annuity factor at ``T`` is
``a(T) = sum_k p_k P(T, T + k)`` (``p_k`` the annuitant's survival, ``k = 1..n`` in arrears,
``0..n-1`` in advance). The benefit is valued at retirement: ``K max(g a(T), 1)``; the option
pays ``K max(g a(T) - 1, 0)`` (Boyle and Hardy, "Guaranteed annuity options", ASTIN Bulletin
33(2), 2003). Paying the annuity's market value at ``T`` is the same as paying the annuity,
since ``D_T P(T, T + k) = E[D_{T+k} | F_T]``, so the projection never needs the scenarios
beyond retirement.
"""

from __future__ import annotations

import numpy as np

from pqflow.errors import LiabilityDataError
from pqflow.liabilities.decrements import decrement_table, survival_curve
from pqflow.liabilities.portfolio import DeferredAnnuityGAO, ModelPoint, Participating, UnitLinkedGMMB
from pqflow.liabilities.scenarios import AnnualScenarios

__all__ = [
    "project_model_point",
    "project_unit_linked",
    "project_participating",
    "project_deferred_annuity",
    "fund_returns",
    "annuity_factor",
    "needed_bond_maturities",
    "needed_columns",
]


def _pad(values: np.ndarray, last_year: int) -> np.ndarray:
    """Pad ``(n, T + 1)`` cash flows with zeros to ``(n, last_year + 1)``."""
    out = np.zeros((values.shape[0], last_year + 1))
    out[:, : values.shape[1]] = values
    return out


def _equity_growth(scen: AnnualScenarios, term: int) -> np.ndarray:
    if scen.equity is None:
        raise ValueError("equity index values were not read for this projection")
    return scen.equity[:, : term + 1] / scen.equity[:, :1]


def project_unit_linked(mp: UnitLinkedGMMB, scen: AnnualScenarios) -> tuple[np.ndarray, np.ndarray]:
    """Benefits and guarantee payoff, each ``(n_paths, J + 1)``."""
    T = mp.term
    dec = decrement_table(mp.mortality, mp.lapse_rate, mp.age, T)
    charge = (1.0 - mp.fund_charge) ** np.arange(T + 1)
    fund = mp.premium * _equity_growth(scen, T) * charge[None, :]
    g_T = mp.guarantee * (1.0 + mp.roll_up_rate) ** T
    benefits = fund * (dec.deaths + dec.lapses)[None, :]
    topup = np.maximum(g_T - fund[:, T], 0.0)
    benefits[:, T] += dec.in_force[T] * (fund[:, T] + topup)
    guarantee = np.zeros_like(benefits)
    guarantee[:, T] = dec.in_force[T] * topup
    last = scen.years.size - 1
    return _pad(mp.policies * benefits, last), _pad(mp.policies * guarantee, last)


def fund_returns(mp: Participating, scen: AnnualScenarios) -> np.ndarray:
    """Fund return ``R_j`` of year ``j = 1..T``, shape ``(n_paths, T)``."""
    T = mp.term
    ret = np.zeros((scen.n_paths, T))
    if mp.equity_share > 0.0:
        growth = _equity_growth(scen, T)
        ret += mp.equity_share * (growth[:, 1:] / growth[:, :-1] - 1.0)
    if mp.cash_share > 0.0:
        if scen.cash_account is None:
            raise ValueError("the cash account was not read for this projection")
        b = scen.cash_account[:, : T + 1]
        ret += mp.cash_share * (b[:, 1:] / b[:, :-1] - 1.0)
    if mp.bond_share > 0.0:
        if mp.bond_maturity is None:
            raise LiabilityDataError(f"model point {mp.id!r}: bond_share > 0 needs bond_maturity")
        m = float(mp.bond_maturity)
        prices = scen.bond_prices([m, m - 1.0])[:, : T + 1, :]
        ret += mp.bond_share * (prices[:, 1:, 1] / prices[:, :-1, 0] - 1.0)
    return ret


def project_participating(mp: Participating, scen: AnnualScenarios) -> tuple[np.ndarray, np.ndarray]:
    """Benefits and guarantee payoff, each ``(n_paths, J + 1)``."""
    T = mp.term
    dec = decrement_table(mp.mortality, mp.lapse_rate, mp.age, T)
    ret = fund_returns(mp, scen)
    if mp.smoothing > 0.0:
        smoothed = np.empty_like(ret)
        prev = np.full(scen.n_paths, mp.initial_smoothed_return)
        for j in range(T):
            prev = (1.0 - mp.smoothing) * ret[:, j] + mp.smoothing * prev
            smoothed[:, j] = prev
        ret = smoothed
    bonus = mp.bonus_share * ret
    credited = np.maximum(mp.guaranteed_rate, bonus)
    ones = np.ones((scen.n_paths, 1))
    account = mp.premium * np.cumprod(np.hstack([ones, 1.0 + credited]), axis=1)
    no_floor = mp.premium * np.cumprod(np.hstack([ones, 1.0 + bonus]), axis=1)
    exits = (dec.deaths + dec.lapses)[None, :]
    benefits = account * exits
    benefits[:, T] += dec.in_force[T] * account[:, T]
    guarantee = (account - no_floor) * exits
    guarantee[:, T] += dec.in_force[T] * (account[:, T] - no_floor[:, T])
    last = scen.years.size - 1
    return _pad(mp.policies * benefits, last), _pad(mp.policies * guarantee, last)


def annuity_factor(mp: DeferredAnnuityGAO, scen: AnnualScenarios) -> np.ndarray:
    """Market annuity factor at retirement ``a(T) = sum_k p_k P(T, T + k)``, shape ``(n_paths,)``."""
    ks = mp.annuity_maturities()
    survival = survival_curve(mp.annuity_mortality, mp.age + mp.term, ks[-1])[ks]
    prices = scen.bond_prices(np.array(ks, dtype=float), year=mp.term)
    return prices @ survival


def project_deferred_annuity(mp: DeferredAnnuityGAO, scen: AnnualScenarios) -> tuple[np.ndarray, np.ndarray]:
    """Benefits and option payoff, each ``(n_paths, J + 1)``; the retirement benefit is the
    value at ``T`` of the better of cash and the guaranteed annuity."""
    T = mp.term
    dec = decrement_table(mp.mortality, mp.lapse_rate, mp.age, T)
    if mp.accumulation == "fixed":
        if mp.sum_at_retirement is None:
            raise LiabilityDataError(f"model point {mp.id!r}: accumulation 'fixed' needs sum_at_retirement")
        fund = np.full((scen.n_paths, T + 1), mp.sum_at_retirement)
        benefits = np.zeros_like(fund)  # a pure endowment: exits before retirement get nothing
    else:
        if mp.premium is None:
            raise LiabilityDataError(f"model point {mp.id!r}: accumulation {mp.accumulation!r} needs premium")
        charge = (1.0 - mp.fund_charge) ** np.arange(T + 1)
        fund = mp.premium * _equity_growth(scen, T) * charge[None, :]
        benefits = fund * (dec.deaths + dec.lapses)[None, :]
    value_per_unit = mp.guaranteed_annuity_rate * annuity_factor(mp, scen)
    option = fund[:, T] * np.maximum(value_per_unit - 1.0, 0.0)
    benefits[:, T] += dec.in_force[T] * (fund[:, T] + option)
    guarantee = np.zeros_like(benefits)
    guarantee[:, T] = dec.in_force[T] * option
    last = scen.years.size - 1
    return _pad(mp.policies * benefits, last), _pad(mp.policies * guarantee, last)


def project_model_point(mp: ModelPoint, scen: AnnualScenarios) -> tuple[np.ndarray, np.ndarray]:
    """Dispatch on the product: ``(benefits, guarantee)``, each ``(n_paths, J + 1)``."""
    if isinstance(mp, UnitLinkedGMMB):
        return project_unit_linked(mp, scen)
    if isinstance(mp, Participating):
        return project_participating(mp, scen)
    if isinstance(mp, DeferredAnnuityGAO):
        return project_deferred_annuity(mp, scen)
    raise TypeError(f"unknown model point type {type(mp).__name__}")


def needed_bond_maturities(mp: ModelPoint) -> list[float]:
    """Bond maturities (years to run) the model point asks for."""
    if isinstance(mp, Participating) and mp.bond_share > 0.0:
        if mp.bond_maturity is None:
            raise LiabilityDataError(f"model point {mp.id!r}: bond_share > 0 needs bond_maturity")
        return [float(mp.bond_maturity), float(mp.bond_maturity - 1)]
    if isinstance(mp, DeferredAnnuityGAO):
        return [float(k) for k in mp.annuity_maturities()]
    return []


def needed_columns(mp: ModelPoint) -> set[str]:
    """Which kinds of column the model point reads: ``equity``, ``cash_account``, ``bonds``."""
    kinds: set[str] = set()
    if isinstance(mp, UnitLinkedGMMB):
        kinds.add("equity")
    elif isinstance(mp, Participating):
        if mp.equity_share > 0.0:
            kinds.add("equity")
        if mp.cash_share > 0.0:
            kinds.add("cash_account")
    elif mp.accumulation == "unit_linked":
        kinds.add("equity")
    if needed_bond_maturities(mp):
        kinds.add("bonds")
    return kinds
