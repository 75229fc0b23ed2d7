"""Martingale ("1 = 1") tests on the written files.

For every asset ``A`` and output time ``t > 0`` the deflated price must average to today's
price: ``E[D_t A_t] = A_0``, with ``D_t = 1 / B_t`` in the market-consistent set and
``D_t = Z_t / B_t`` (density over cash account) in the real-world set; both sets store ``D_t``
as the ``deflator`` column. Assets tested (Society of Actuaries, *Economic Scenario Generators:
A Practical Guide*, 2016, section 8.3):

* each zero-coupon bond column ``zcb_{m}y``: ``E[D_t P(t, t+m)] = P(0, t+m)``;
* each equity total-return index: ``E[D_t S_t] = S_0``;
* the deflator itself, the bond maturing at ``t``: ``E[D_t] = P(0, t)``.

Standard errors come from independent sampling units (antithetic pairs averaged first). A cell
passes at level ``1 - alpha`` when ``|ratio - 1| <= z_{1-alpha/2} * se``.
"""

from __future__ import annotations

import re
from collections.abc import Callable

import numpy as np
import pandas as pd
from scipy.stats import norm

from pqflow.validation.moments import Moments, sampling_units
from pqflow.validation.reader import ScenarioSetReader

__all__ = ["martingale_table", "bond_maturity_of", "LEVELS"]

LEVELS = (0.95, 0.99)
_BOND = re.compile(r"^zcb_(?P<m>[0-9.eE+-]+)y$")


def bond_maturity_of(column: str) -> float | None:
    """``zcb_10y`` -> 10.0; ``None`` for a column that is not a bond."""
    match = _BOND.match(column)
    return float(match.group("m")) if match else None


def martingale_table(
    reader: ScenarioSetReader, discount: Callable[[np.ndarray], np.ndarray]
) -> pd.DataFrame:
    """One row per (asset, time > 0). ``discount`` is today's curve ``t -> P(0, t)``."""
    names = reader.column_names()
    bonds = [c for c in names if bond_maturity_of(c) is not None]
    equities = [c for c in names if c.startswith("equity_")]
    assets = ["deflator", *bonds, *equities]
    antithetic = reader.antithetic

    acc: dict[str, Moments | None] = {a: None for a in assets}
    times = None
    equity_start: dict[str, float] = {}
    for times, cols in reader.iter_arrays(["deflator", *bonds, *equities]):
        deflator = cols["deflator"]
        for a in assets:
            values = deflator if a == "deflator" else cols[a] * deflator
            m = Moments.of(sampling_units(values, antithetic))
            acc[a] = m if acc[a] is None else acc[a].merge(m)
        for e in equities:
            equity_start.setdefault(e, float(cols[e][0, 0]))
    assert times is not None

    rows = []
    for a in assets:
        moments = acc[a]
        assert moments is not None
        if a == "deflator":
            ref = discount(times)
            kind = "zero bond maturing at t (deflator)"
        elif a in equities:
            ref = np.full(times.shape, equity_start[a])
            kind = "equity total-return index"
        else:
            m = bond_maturity_of(a)
            assert m is not None
            ref = discount(times + m)
            kind = f"zero bond, {m:g} years to run"
        ratio = moments.mean / ref
        se = moments.std_error / ref
        for k in range(1, times.size):
            z = (ratio[k] - 1.0) / se[k] if se[k] > 0 else 0.0
            row = {
                "asset": a,
                "description": kind,
                "time": float(times[k]),
                "expected": float(ref[k]),
                "estimate": float(moments.mean[k]),
                "std_error": float(moments.std_error[k]),
                "ratio": float(ratio[k]),
                "ratio_std_error": float(se[k]),
                "z_score": float(z),
            }
            for level in LEVELS:
                row[f"pass_{int(round(level * 100))}"] = bool(abs(z) <= norm.ppf(0.5 + level / 2))
            rows.append(row)
    return pd.DataFrame(rows)
