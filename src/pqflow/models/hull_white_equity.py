"""The column name of a zero-coupon bond, shared by every model that publishes bonds.

The exact single-part transition that used to live here (Hull-White rates with one equity
index) is now an independent test oracle in ``tests/oracles/hull_white_equity.py``: the one
simulation model is :class:`pqflow.models.economy.EconomyModel`.
"""

from __future__ import annotations

__all__ = ["bond_column"]


def bond_column(maturity: float) -> str:
    """Column name of the zero-coupon bond with ``maturity`` years to run: ``zcb_10y``."""
    return f"zcb_{maturity:g}y"
