"""Option pricing formulas of the quote conventions, and their implied volatilities.

Every formula prices an option on a forward ``F`` struck at ``K`` that pays at (or is valued
through) a numeraire worth ``annuity`` today: the swap annuity ``A = sum tau_i P(0, T_i)`` for a
swaption, the discount factor ``P(0, T)`` for an option paid at its expiry. With ``s`` the
standard deviation of the forward over the option's life:

    Bachelier (normal), s = sigma_N sqrt(T), d = (F - K) / s:
        call = A [(F - K) Phi(d) + s phi(d)],     put = A [(K - F) Phi(-d) + s phi(d)];
    Black (lognormal) with shift delta (delta = 0: plain Black-76), s = sigma sqrt(T),
    d_{1,2} = ln((F + delta) / (K + delta)) / s +- s / 2:
        call = A [(F + delta) Phi(d1) - (K + delta) Phi(d2)],
        put  = A [(K + delta) Phi(-d2) - (F + delta) Phi(-d1)].

"Call" and "payer" are the same option (the right to pay ``K`` for ``F``), "put" and
"receiver" the same. Volatilities are absolute decimals here (a normal vol of 85 bp is
``0.0085``); the quote objects of :mod:`pqflow.calibration.swaptions` carry market units.

The price functions broadcast their array arguments together and return an array of the
broadcast shape. The implied-volatility functions invert one option at a time with Brent's
method on a bracket that is first widened until it holds the root, and raise
:class:`pqflow.errors.MarketDataError` naming the option when the price lies outside the
no-arbitrage bounds (below intrinsic value, or for Black at or above ``A (F + delta)``).
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from scipy.optimize import brentq
from scipy.stats import norm

from pqflow.errors import MarketDataError

__all__ = [
    "VolConvention",
    "VOL_CONVENTIONS",
    "bachelier_price",
    "black_price",
    "bachelier_implied_vol",
    "black_implied_vol",
    "option_price",
    "implied_vol",
]

VolConvention = Literal["normal", "lognormal", "shifted_lognormal"]
VOL_CONVENTIONS: tuple[str, ...] = ("normal", "lognormal", "shifted_lognormal")

_CALL = {"call": 1.0, "payer": 1.0, "put": -1.0, "receiver": -1.0}
_PRICE_RTOL = 1e-13  # relative slack at the no-arbitrage bounds (rounding of the price)
_MAX_WIDENINGS = 200


def _omega(kind: str) -> float:
    try:
        return _CALL[kind]
    except KeyError:
        raise ValueError(
            f"option kind must be one of {sorted(_CALL)}, not {kind!r}"
        ) from None


def _check_time_vol(volatility: np.ndarray, expiry: np.ndarray) -> None:
    if np.any(~np.isfinite(volatility)) or np.any(volatility < 0.0):
        raise ValueError("volatilities must be finite and not negative")
    if np.any(~np.isfinite(expiry)) or np.any(expiry < 0.0):
        raise ValueError("expiries must be finite and not negative")


def bachelier_price(
    forward: np.ndarray | float,
    strike: np.ndarray | float,
    volatility: np.ndarray | float,
    expiry: np.ndarray | float,
    *,
    annuity: np.ndarray | float = 1.0,
    kind: str = "call",
) -> np.ndarray:
    """Bachelier (normal model) price; ``volatility`` is the absolute normal vol (decimal).

    All array arguments broadcast together; the result has the broadcast shape. With zero
    volatility or expiry the price is the discounted intrinsic value.
    """
    w = _omega(kind)
    f, k, v, t, a = np.broadcast_arrays(
        *(np.asarray(z, dtype=float) for z in (forward, strike, volatility, expiry, annuity))
    )
    _check_time_vol(v, t)
    s = v * np.sqrt(t)
    moneyness = w * (f - k)
    positive = s > 0.0
    safe_s = np.where(positive, s, 1.0)
    d = moneyness / safe_s
    value = np.where(
        positive, moneyness * norm.cdf(d) + safe_s * norm.pdf(d), np.maximum(moneyness, 0.0)
    )
    return a * value


def black_price(
    forward: np.ndarray | float,
    strike: np.ndarray | float,
    volatility: np.ndarray | float,
    expiry: np.ndarray | float,
    *,
    annuity: np.ndarray | float = 1.0,
    kind: str = "call",
    shift: np.ndarray | float = 0.0,
) -> np.ndarray:
    """Black (lognormal) price, shifted by ``shift`` (``delta``; 0 gives Black-76).

    Needs ``F + delta > 0`` and ``K + delta >= 0`` (at ``K + delta = 0`` a call is worth
    ``A (F - K)``). All array arguments broadcast together; the result has the broadcast shape.
    """
    w = _omega(kind)
    f, k, v, t, a, d = np.broadcast_arrays(
        *(np.asarray(z, dtype=float) for z in (forward, strike, volatility, expiry, annuity, shift))
    )
    _check_time_vol(v, t)
    fs, ks = f + d, k + d
    if np.any(~(fs > 0.0)):
        raise ValueError("Black's formula needs forward + shift > 0")
    if np.any(~(ks >= 0.0)):
        raise ValueError("Black's formula needs strike + shift >= 0")
    s = v * np.sqrt(t)
    regular = (s > 0.0) & (ks > 0.0)
    safe_s = np.where(regular, s, 1.0)
    safe_k = np.where(regular, ks, 1.0)
    d1 = np.log(fs / safe_k) / safe_s + 0.5 * safe_s
    d2 = d1 - safe_s
    value = w * (fs * norm.cdf(w * d1) - safe_k * norm.cdf(w * d2))
    return a * np.where(regular, value, np.maximum(w * (fs - ks), 0.0))


def _invert(
    price_of_vol,
    target: float,
    lower_bound: float,
    upper_bound: float,
    first_guess: float,
    label: str,
) -> float:
    """Root of ``price_of_vol(v) = target`` on ``v >= 0``; price increasing in ``v``."""
    scale = max(abs(target), abs(lower_bound), 1e-300)
    slack = _PRICE_RTOL * scale
    if not np.isfinite(target):
        raise MarketDataError(f"{label}: price {target!r} is not a finite number")
    if target < lower_bound - slack:
        raise MarketDataError(
            f"{label}: price {target:.10g} is below the no-arbitrage lower bound "
            f"(intrinsic value {lower_bound:.10g}); no volatility reproduces it"
        )
    if target >= upper_bound - slack:
        raise MarketDataError(
            f"{label}: price {target:.10g} is at or above the no-arbitrage upper bound "
            f"{upper_bound:.10g}; no volatility reproduces it"
        )
    if target <= lower_bound + slack:
        return 0.0
    hi = first_guess
    for _ in range(_MAX_WIDENINGS):
        if price_of_vol(hi) > target:
            break
        hi *= 2.0
    else:  # pragma: no cover - the price is unbounded (normal) or tends to the bound (Black)
        raise MarketDataError(f"{label}: no volatility bracket found for price {target:.10g}")
    return float(
        brentq(lambda v: price_of_vol(v) - target, 0.0, hi, xtol=1e-300,
               rtol=4.0 * np.finfo(float).eps, maxiter=500)
    )


def _elementwise(args: tuple[np.ndarray | float, ...], solve) -> np.ndarray:
    arrays = np.broadcast_arrays(*(np.asarray(z, dtype=float) for z in args))
    out = np.empty(arrays[0].shape)
    for idx in np.ndindex(out.shape):
        out[idx] = solve(*(float(z[idx]) for z in arrays))
    return out


def bachelier_implied_vol(
    price: np.ndarray | float,
    forward: np.ndarray | float,
    strike: np.ndarray | float,
    expiry: np.ndarray | float,
    *,
    annuity: np.ndarray | float = 1.0,
    kind: str = "call",
) -> np.ndarray:
    """Normal (Bachelier) implied volatility, absolute decimal, of each price.

    Arguments broadcast together; the result has the broadcast shape. A price equal to the
    intrinsic value gives 0; a price below it raises :class:`MarketDataError`.
    """
    w = _omega(kind)

    def solve(p: float, f: float, k: float, t: float, a: float) -> float:
        if not t > 0.0 or not a > 0.0:
            raise ValueError("implied volatility needs a positive expiry and annuity")
        label = f"{kind} F={f:.8g} K={k:.8g} T={t:g}"
        target = p / a
        intrinsic = max(w * (f - k), 0.0)
        guess = max(target, abs(f - k), 1e-12) * np.sqrt(2.0 * np.pi / t)
        return _invert(
            lambda v: float(bachelier_price(f, k, v, t, kind=kind)),
            target, intrinsic, np.inf, guess, label,
        )

    return _elementwise((price, forward, strike, expiry, annuity), solve)


def black_implied_vol(
    price: np.ndarray | float,
    forward: np.ndarray | float,
    strike: np.ndarray | float,
    expiry: np.ndarray | float,
    *,
    annuity: np.ndarray | float = 1.0,
    kind: str = "call",
    shift: np.ndarray | float = 0.0,
) -> np.ndarray:
    """Black (shifted when ``shift != 0``) implied volatility of each price.

    Arguments broadcast together; the result has the broadcast shape. Prices outside
    ``[intrinsic, A (F + delta))`` for a call (``[intrinsic, A (K + delta))`` for a put) raise
    :class:`MarketDataError`.
    """
    w = _omega(kind)

    def solve(p: float, f: float, k: float, t: float, a: float, d: float) -> float:
        if not t > 0.0 or not a > 0.0:
            raise ValueError("implied volatility needs a positive expiry and annuity")
        if not f + d > 0.0 or not k + d > 0.0:
            raise ValueError(
                f"Black implied volatility needs forward + shift > 0 and strike + shift > 0 "
                f"(forward {f:g}, strike {k:g}, shift {d:g})"
            )
        label = f"{kind} F={f:.8g} K={k:.8g} T={t:g} shift={d:g}"
        target = p / a
        intrinsic = max(w * (f - k), 0.0)
        upper = f + d if w > 0 else k + d
        return _invert(
            lambda v: float(black_price(f, k, v, t, kind=kind, shift=d)),
            target, intrinsic, upper, 1.0 / np.sqrt(t), label,
        )

    return _elementwise((price, forward, strike, expiry, annuity, shift), solve)


def option_price(
    convention: str,
    forward: np.ndarray | float,
    strike: np.ndarray | float,
    volatility: np.ndarray | float,
    expiry: np.ndarray | float,
    *,
    annuity: np.ndarray | float = 1.0,
    kind: str = "call",
    shift: np.ndarray | float = 0.0,
) -> np.ndarray:
    """Price in a quote convention: ``normal`` (Bachelier), ``lognormal`` (Black, shift
    ignored and must be 0) or ``shifted_lognormal`` (Black with ``shift``)."""
    if convention == "normal":
        return bachelier_price(forward, strike, volatility, expiry, annuity=annuity, kind=kind)
    if convention == "lognormal":
        _require_zero_shift(shift)
        return black_price(forward, strike, volatility, expiry, annuity=annuity, kind=kind)
    if convention == "shifted_lognormal":
        return black_price(
            forward, strike, volatility, expiry, annuity=annuity, kind=kind, shift=shift
        )
    raise ValueError(f"vol convention must be one of {VOL_CONVENTIONS}, not {convention!r}")


def implied_vol(
    convention: str,
    price: np.ndarray | float,
    forward: np.ndarray | float,
    strike: np.ndarray | float,
    expiry: np.ndarray | float,
    *,
    annuity: np.ndarray | float = 1.0,
    kind: str = "call",
    shift: np.ndarray | float = 0.0,
) -> np.ndarray:
    """Implied volatility (absolute decimal) in a quote convention; see :func:`option_price`."""
    if convention == "normal":
        return bachelier_implied_vol(price, forward, strike, expiry, annuity=annuity, kind=kind)
    if convention == "lognormal":
        _require_zero_shift(shift)
        return black_implied_vol(price, forward, strike, expiry, annuity=annuity, kind=kind)
    if convention == "shifted_lognormal":
        return black_implied_vol(
            price, forward, strike, expiry, annuity=annuity, kind=kind, shift=shift
        )
    raise ValueError(f"vol convention must be one of {VOL_CONVENTIONS}, not {convention!r}")


def _require_zero_shift(shift: np.ndarray | float) -> None:
    if np.any(np.asarray(shift, dtype=float) != 0.0):
        raise ValueError("a 'lognormal' quote has no shift: use 'shifted_lognormal'")
