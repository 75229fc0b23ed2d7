"""Deterministic decrements: deaths (a mortality law) and lapses (an annual rate).

Policy years run from ``j - 1`` to ``j`` (``j = 1 .. term``). Of the policies in force at the
start of year ``j``, a share ``q`` dies during the year (death benefit paid at the year end,
the curtate convention); of the survivors a share ``lapse_rate`` lapses at the year end, except
in the final year, where the survivors reach maturity (or retirement). Decrements do not depend
on the economic scenario, so expected cash flows are the in-force shares times the cash flows of
one policy on each scenario.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pqflow.liabilities.portfolio import GompertzMakeham

__all__ = ["Decrements", "decrement_table", "survival_curve"]


@dataclass(frozen=True, kw_only=True)
class Decrements:
    """Shares of the policies at time 0, by year end ``j = 0 .. term`` (index 0 is all zero).

    deaths: died in year ``j``, shape ``(term + 1,)``.
    lapses: lapsed at the end of year ``j`` (zero at ``j = term``), shape ``(term + 1,)``.
    in_force: in force just after the year-end decrements of year ``j``; ``in_force[term]`` is
    the share reaching maturity, shape ``(term + 1,)``.
    """

    deaths: np.ndarray
    lapses: np.ndarray
    in_force: np.ndarray


def survival_curve(mortality: GompertzMakeham | None, age: float, years: int) -> np.ndarray:
    """``k p_age`` for ``k = 0 .. years``, shape ``(years + 1,)``; all ones without mortality."""
    k = np.arange(years + 1, dtype=float)
    if mortality is None:
        return np.ones_like(k)
    return np.exp(-mortality.integrated_hazard(age, k))


def decrement_table(
    mortality: GompertzMakeham | None, lapse_rate: float, age: float, term: int
) -> Decrements:
    """Deaths, lapses and policies in force per year end for one model point."""
    p_year = survival_curve(mortality, age, term)
    p_one = p_year[1:] / p_year[:-1]  # one-year survival at ages age .. age + term - 1
    deaths = np.zeros(term + 1)
    lapses = np.zeros(term + 1)
    in_force = np.ones(term + 1)
    for j in range(1, term + 1):
        start = in_force[j - 1]
        deaths[j] = start * (1.0 - p_one[j - 1])
        survivors = start * p_one[j - 1]
        lapses[j] = survivors * lapse_rate if j < term else 0.0
        in_force[j] = survivors - lapses[j]
    return Decrements(deaths=deaths, lapses=lapses, in_force=in_force)
