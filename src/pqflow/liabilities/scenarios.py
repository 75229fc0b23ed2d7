"""What the liability projection needs of a scenario set, at whole-year times.

The products are annual (yearly crediting, charges and decrements), so the projection uses the
output times that are whole years, ``0, 1, .., J``. On the demo's annual grid that is every
output time; on a sub-annual grid (``steps_per_year > 1``) the times between anniversaries are
skipped: they carry no cash flow of these products, and values do not depend on the grid.

Bond prices at maturities the files do not carry are interpolated **linearly in maturity on
log prices** between the written maturities, with ``ln P(t, t) = 0`` as the node at maturity
0. Between nodes this is a constant forward rate; beyond the longest written maturity the last
segment's forward is continued (flat forward) for at most ``bond_extrapolation_years`` (a
portfolio setting, 0 by default); asking further is an error. Under Hull-White
``ln P(t, t + m)`` is a smooth concave-in-``B(m)`` function of ``m``, so with the demo's yearly
bonds to 10 years the interpolation is exact at whole years to 10 and close between the
longer pillars; write every maturity you need (``outputs.bond_maturities``) to make it exact.

The certainty-equivalent scenario is the deterministic forward scenario from today's curve:
the short rate follows today's forwards, so ``B_t = 1 / P(0, t)``, the deflator is
``P(0, t)``, every asset (and the equity total-return index) grows at the forward rate,
``S_t = S_0 / P(0, t)``, and bond prices are today's forward prices
``P(t, t + m) = P(0, t + m) / P(0, t)``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from pqflow.market.curve import DiscountCurve

__all__ = [
    "BondInterpolation",
    "AnnualScenarios",
    "whole_year_indices",
    "annual_scenarios",
    "certainty_equivalent_scenario",
]

_TIME_TOL = 1e-9


@dataclass(frozen=True, kw_only=True)
class BondInterpolation:
    """Log-linear interpolation in maturity on the written bond maturities.

    written: maturities of the ``zcb_{m}y`` columns, strictly increasing, shape ``(L,)``.
    max_extrapolation: years beyond ``written[-1]`` the last forward may be continued.
    """

    written: tuple[float, ...]
    max_extrapolation: float = 0.0

    @property
    def longest(self) -> float:
        """Longest maturity that may be asked for."""
        return (self.written[-1] if self.written else 0.0) + self.max_extrapolation

    def weights(self, targets: np.ndarray | list[float]) -> np.ndarray:
        """``W`` with ``ln P(t, t + target) = W @ ln P(t, t + written)``: shape ``(k, L)``."""
        targets = np.asarray(targets, dtype=float)
        nodes = np.concatenate(([0.0], np.asarray(self.written, dtype=float)))
        w = np.zeros((targets.size, nodes.size))
        for i, tau in enumerate(targets):
            if tau < -_TIME_TOL or tau > self.longest + _TIME_TOL:
                raise ValueError(
                    f"bond maturity {tau:g} years is outside what the files support "
                    f"(0 to {self.longest:g} years)"
                )
            if nodes.size == 1:  # no bonds written: only maturity 0 is known
                if tau > _TIME_TOL:
                    raise ValueError("the scenario files carry no zcb_ columns")
                continue
            hi = int(np.clip(np.searchsorted(nodes, tau - _TIME_TOL), 1, nodes.size - 1))
            lo = hi - 1
            frac = (tau - nodes[lo]) / (nodes[hi] - nodes[lo])
            w[i, lo] += 1.0 - frac
            w[i, hi] += frac
        return w[:, 1:]  # ln P at maturity 0 is 0: its weight drops out


@dataclass(frozen=True, kw_only=True)
class AnnualScenarios:
    """Scenario values at whole years ``0 .. J`` (each array ``(n_paths, J + 1)``).

    bonds: ``P(j, j + written[l])``, shape ``(n_paths, J + 1, L)``, or ``None`` when no
    product needs bond prices. ``cash_account`` and ``equity`` are ``None`` when not read.
    """

    years: np.ndarray
    deflator: np.ndarray
    cash_account: np.ndarray | None
    equity: np.ndarray | None
    bonds: np.ndarray | None
    interpolation: BondInterpolation

    @property
    def n_paths(self) -> int:
        return int(self.deflator.shape[0])

    def bond_prices(self, maturities: list[float] | np.ndarray, year: int | None = None) -> np.ndarray:
        """``P(j, j + m)`` for the given maturities: shape ``(n_paths, J + 1, k)``, or
        ``(n_paths, k)`` at one ``year``."""
        w = self.interpolation.weights(maturities)
        if not np.any(w):
            shape = (self.n_paths, len(maturities)) if year is not None else (
                self.n_paths, self.years.size, len(maturities))
            return np.ones(shape)
        if self.bonds is None:
            raise ValueError("bond prices were not read for this projection")
        logs = np.log(self.bonds if year is None else self.bonds[:, year, :])
        return np.exp(logs @ w.T)


def whole_year_indices(times: np.ndarray, last_year: int) -> np.ndarray:
    """Indices of the output times ``0, 1, .., last_year`` in ``times`` (shape ``(J + 1,)``)."""
    idx = np.nonzero(np.abs(times - np.round(times)) < _TIME_TOL)[0]
    years = np.round(times[idx]).astype(int)
    keep = idx[years <= last_year]
    if keep.size != last_year + 1 or np.any(np.round(times[keep]) != np.arange(last_year + 1)):
        raise ValueError(
            f"the output grid does not hold every whole year 0..{last_year} "
            f"(times run {times[0]:g}..{times[-1]:g})"
        )
    return keep


def annual_scenarios(
    times: np.ndarray,
    columns: dict[str, np.ndarray],
    *,
    last_year: int,
    equity_column: str | None,
    bond_columns: Sequence[str],
    interpolation: BondInterpolation,
    deflator_column: str = "deflator",
) -> AnnualScenarios:
    """Pick the whole years ``0..last_year`` out of one part's ``(n_paths, n_times)`` columns.

    bond_columns: every written ``zcb_`` column in the order of ``interpolation.written``; a
    column absent from ``columns`` (not read because no interpolation weight falls on it) is
    filled with price 1.
    """
    idx = whole_year_indices(times, last_year)
    bonds = None
    if bond_columns:  # a bond not read gets price 1 (log 0): only ever with interpolation weight 0
        n_paths = columns[deflator_column].shape[0]
        ones = np.ones((n_paths, idx.size))
        bonds = np.stack([columns[c][:, idx] if c in columns else ones for c in bond_columns], axis=-1)
    return AnnualScenarios(
        years=np.arange(last_year + 1, dtype=float),
        deflator=columns[deflator_column][:, idx],
        cash_account=columns["cash_account"][:, idx] if "cash_account" in columns else None,
        equity=columns[equity_column][:, idx] if equity_column else None,
        bonds=bonds,
        interpolation=interpolation,
    )


def certainty_equivalent_scenario(
    curve: DiscountCurve,
    *,
    last_year: int,
    interpolation: BondInterpolation,
    equity_level: float,
) -> AnnualScenarios:
    """The deterministic forward scenario (one path) from today's curve, at whole years."""
    years = np.arange(last_year + 1, dtype=float)
    p0 = np.asarray(curve.discount(years), dtype=float)
    written = np.asarray(interpolation.written, dtype=float)
    bonds = None
    if written.size:
        need = years[-1] + written[-1]
        if need > curve.max_maturity + _TIME_TOL:
            raise ValueError(
                f"today's curve ends at {curve.max_maturity:g} years but the forward scenario "
                f"needs bond prices to {need:g} years"
            )
        bonds = (curve.discount(years[:, None] + written[None, :]) / p0[:, None])[None, :, :]
    return AnnualScenarios(
        years=years,
        deflator=p0[None, :],
        cash_account=(1.0 / p0)[None, :],
        equity=(equity_level / p0)[None, :],
        bonds=bonds,
        interpolation=interpolation,
    )
