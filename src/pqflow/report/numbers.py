"""How every number is shown: one rule, used by the report, the terminal tables and ``compare``.

The rule (stated once here; README "Reading the numbers" repeats it for users):

* **money**: whole currency units with thousands separators (``82,701,512``), or a stated scale
  (``scale=1_000`` gives ``82,702`` under a header that says "thousands"); never scientific
  notation; a standard error beside a value is shown at the same scale (``82,701,512 ± 645,197``).
* **rates** (interest rates, yields, spreads, returns): in percent with two or three decimals
  (``2.318%``); **moves** of a rate in basis points with a sign (``+25.0 bp``).
* **volatilities**: in points (percent of volatility: ``17.50``), moves in points with a sign
  (``+1.00 pt``); normal (bp) volatilities stay in bp.
* **prices** (Monte Carlo estimates with a standard error): as many decimals as show the SE to
  two significant digits, and the value to the same decimals (``117.0 ± 2.7``,
  ``0.003297 ± 0.000078``); without an SE, six significant digits.
* **exact to rounding**: a non-zero magnitude below ``1e-10`` in the unit it is stated in is
  shown as ``< 1e-10`` (fit errors of closed-form bootstraps are of the order 1e-17; printing
  them as numbers suggests an error that does not exist).
* **other numbers** (z-scores, ratios, counts): z-scores with two decimals, counts with thousands
  separators, anything else with four significant digits and no exponent.

Missing values (``None``, NaN) print as an en dash.
"""

from __future__ import annotations

import math
from typing import Any

__all__ = [
    "TINY",
    "DASH",
    "is_number",
    "number",
    "plain",
    "count",
    "money",
    "money_se",
    "percent",
    "bp",
    "bp_move",
    "rate_move",
    "vol_points",
    "vol_move",
    "price",
    "price_se",
    "zscore",
    "share",
    "years",
    "signed",
    "decimals_for_se",
]

TINY = 1e-10
DASH = "–"


def is_number(v: Any) -> bool:
    """A finite real number (bools are not numbers here)."""
    if v is None or isinstance(v, bool):
        return False
    try:
        x = float(v)
    except (TypeError, ValueError):
        return False
    return math.isfinite(x)


def _tiny(x: float) -> str | None:
    if x != 0.0 and abs(x) < TINY:
        return "< 1e-10"
    return None


def _fixed(x: float, decimals: int, *, sign: bool = False) -> str:
    text = f"{x:{'+' if sign else ''},.{max(decimals, 0)}f}"
    if text.lstrip("+-").strip("0.,") == "":  # rounds to zero: no "-0.00"
        text = f"{0.0:.{max(decimals, 0)}f}"
    return text


def number(v: Any, sig: int = 4, *, sign: bool = False) -> str:
    """A plain number: ``sig`` significant digits, thousands separators, never an exponent."""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if not is_number(v):
        return DASH if v is None or isinstance(v, (int, float)) else str(v)
    x = float(v)
    if isinstance(v, int) and not sign:
        return f"{v:,}"
    if x == 0:
        return "0"
    if (t := _tiny(x)) is not None:
        return t
    magnitude = math.floor(math.log10(abs(x)))
    decimals = max(sig - 1 - magnitude, 0)
    return _fixed(x, decimals, sign=sign)


def plain(v: Any, sig: int = 4) -> str:
    """:func:`number` without trailing zeros (``0.4``, ``1,000``): for parameters and levels."""
    text = number(v, sig)
    if "." in text and text[-1:].isdigit() and not text.startswith("<"):
        text = text.rstrip("0").rstrip(".")
    return text


def signed(v: Any, sig: int = 4) -> str:
    return number(v, sig, sign=True)


def count(v: Any) -> str:
    return f"{int(v):,}" if is_number(v) else DASH


def money(v: Any, *, scale: float = 1.0, sign: bool = False) -> str:
    """Whole currency units (divided by ``scale``) with thousands separators."""
    if not is_number(v):
        return DASH
    return _fixed(float(v) / scale, 0, sign=sign)


def money_se(v: Any, se: Any, *, scale: float = 1.0) -> str:
    """``value ± SE`` in money; the SE is dropped when it is missing."""
    if not is_number(se):
        return money(v, scale=scale)
    return f"{money(v, scale=scale)} ± {money(se, scale=scale)}"


def percent(v: Any, decimals: int = 3, *, sign: bool = False) -> str:
    """A rate given as a decimal (0.02318) in percent (``2.318%``)."""
    if not is_number(v):
        return DASH
    x = float(v)
    if (t := _tiny(x)) is not None:
        return t
    return _fixed(100.0 * x, decimals, sign=sign) + "%"


def bp(v: Any, decimals: int = 1, *, sign: bool = False) -> str:
    """A quantity already in basis points (``25.0 bp``)."""
    if not is_number(v):
        return DASH
    x = float(v)
    if (t := _tiny(x)) is not None:
        return f"{t} bp"
    return _fixed(x, decimals, sign=sign) + " bp"


def bp_move(v: Any, decimals: int = 1) -> str:
    """A move of a rate given as a decimal (0.0025) in signed basis points (``+25.0 bp``)."""
    if not is_number(v):
        return DASH
    return bp(1e4 * float(v), decimals, sign=True) if _tiny(float(v)) is None else "< 1e-10 bp"


rate_move = bp_move


def vol_points(v: Any, decimals: int = 2) -> str:
    """A (lognormal) volatility given as a decimal (0.175) in points (``17.50``)."""
    if not is_number(v):
        return DASH
    x = float(v)
    if (t := _tiny(x)) is not None:
        return t
    return _fixed(100.0 * x, decimals)


def vol_move(v: Any, decimals: int = 2) -> str:
    """A move of a volatility given as a decimal (0.01) in signed points (``+1.00 pt``)."""
    if not is_number(v):
        return DASH
    x = float(v)
    if (t := _tiny(x)) is not None:
        return t
    return _fixed(100.0 * x, decimals, sign=True) + " pt"


def decimals_for_se(se: float) -> int:
    """Decimals that show ``se`` to two significant digits (0 for SEs of 10 or more)."""
    if not is_number(se) or float(se) <= 0:
        return 0
    return max(1 - math.floor(math.log10(float(se))), 0)


def price(v: Any, se: Any = None) -> str:
    """A price (or any Monte Carlo estimate) with the decimals its SE supports."""
    if not is_number(v):
        return DASH
    x = float(v)
    if (t := _tiny(x)) is not None:
        return t
    if is_number(se) and float(se) > 0:
        return _fixed(x, decimals_for_se(float(se)))
    return number(x, 6)


def price_se(v: Any, se: Any) -> str:
    """``value ± SE`` for a Monte Carlo price; exact values (SE 0 or missing) without the SE."""
    if not is_number(se) or float(se) <= 0:
        return price(v)
    d = decimals_for_se(float(se))
    return f"{price(v, se)} ± {_fixed(float(se), d)}"


def zscore(v: Any) -> str:
    if not is_number(v):
        return DASH
    x = float(v)
    return _fixed(x, 2, sign=False) if abs(x) >= 0.005 or x == 0 else "0.00"


def share(v: Any, decimals: int = 1) -> str:
    """A share in [0, 1] in percent (``8.8%``)."""
    if not is_number(v):
        return DASH
    return _fixed(100.0 * float(v), decimals) + "%"


def years(v: Any) -> str:
    if not is_number(v):
        return DASH
    x = float(v)
    return f"{x:g}" if abs(x) < 1e6 else number(x)
