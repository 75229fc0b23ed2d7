"""The total-return indices as a part kind: the core equity (``[equity]``) and each further
index (``[[indices]]``), one part per entry of :attr:`pqflow.config.schema.RunConfig.index_specs`
(the core first), each fitted by :func:`pqflow.calibration.parts.calibrate_index_from_files`.

The indices predate the part plug-ins, so the kind declares where their pieces have always lived:
its configuration is the normalised list ``index_specs`` (``config_key``; ``entry_list``: one part
per element), its files ``market_data.equity_index`` and ``market_data.equity_vols``
(``market_data_keys``), its option quotes one list ``instruments.equity_options`` (written even
when empty), its fit records ``fit.equity`` (the core) and ``fit.indices.<name>`` (the others,
with their risk premium and rate correlation; :meth:`IndexKind.fit_records`). Its
``calibration.json`` entries keep their legacy places (``parameters.equity`` with
``market_prices_of_risk.equity`` for the core, ``parameters.indices`` for the others), written and
read by :meth:`IndexKind.parameters_json` and :meth:`IndexKind.from_records`. It is registered
in :mod:`pqflow.calibration.part_kinds`, first, so the indices come first among the drivers beyond
rates, as they always have.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from pqflow.calibration.parts import (
    INDEX_MARKET_DATA_KEYS,
    calibrate_index_from_files,
    index_from_record,
    index_record,
    schedule_json,
)
from pqflow.config.schema import IndexSection, IndexSpec
from pqflow.market.curve import DiscountCurve
from pqflow.models.economy import GaussianPart, TotalReturnIndex
from pqflow.models.parts import PartAsset, PartContext, PartFit
from pqflow.models.rates import RatesModel
from pqflow.models.schedule import PiecewiseConstant
from pqflow.storage.calibration_file import IndexRecord, core_index_parameters, further_index_parameters
from pqflow.storage.names import INDEX_PREFIXES

__all__ = ["IndexKind", "INDEX_SECTION"]

#: the kind's section name (the registry key)
INDEX_SECTION = "indices"


def _rates_correlation(context: PartContext, name: str) -> float | tuple[float, float]:
    """Its correlation with the rate driver(s): a number under one rate driver (Hull-White), a
    pair under two (G2++), as :meth:`pqflow.calibration.parts.DriverCorrelation.with_rates`."""
    drivers = context.rates.drivers
    if len(drivers) == 1:
        return context.correlation(drivers[0], name)
    return (context.correlation(drivers[0], name), context.correlation(drivers[1], name))


class IndexKind:
    """Every total-return index as a part kind (module docstring: where its pieces live)."""

    section = INDEX_SECTION
    config_model = IndexSection
    config_key = "index_specs"
    entry_list = True
    fit_key = "indices"
    instruments_key = "equity_options"
    market_data_keys = INDEX_MARKET_DATA_KEYS
    compare_group = "levels"

    def drivers(self, section: IndexSpec) -> tuple[str, ...]:
        return (section.name,)

    def build(self, section: IndexSpec, context: PartContext) -> GaussianPart:
        """The index from typed-in level, yield and volatility (no market file)."""
        return self.calibrate(section, {}, context).part

    def calibrate(self, section: IndexSpec, files: Mapping[str, Path], context: PartContext) -> PartFit:
        rho = _rates_correlation(context, section.name)
        index, lam, fit, options = calibrate_index_from_files(section, files, context.curve, context.rates, rho)
        if not section.core:  # a further index's fit record also carries its premium and rate correlation
            fit = {**fit, "risk_premium": section.risk_premium,
                   "correlation_with_rates": list(rho) if isinstance(rho, tuple) else rho}
        return PartFit(part=index, fit=fit, instruments=options, prices_of_risk={section.name: lam},
                       risk_premia={section.name: section.risk_premium})

    def fit_records(self, sections: Sequence[IndexSpec], fits: Sequence[dict[str, Any]]) -> dict[str, Any]:
        """``fit.equity`` for the core index, ``fit.indices`` (by name) for the others, when any."""
        out: dict[str, Any] = {}
        further: dict[str, Any] = {}
        for spec, fit in zip(sections, fits, strict=True):
            if spec.core:
                out["equity"] = fit
            else:
                further[spec.name] = fit
        if further:
            out["indices"] = further
        return out

    def prices_of_risk(self, section: IndexSpec) -> dict[str, float]:
        """Decided by the fit (premium over volatility): :meth:`calibrate`."""
        return {}

    # -- its calibration.json entries, at their legacy places

    def records(self, indices: Sequence[TotalReturnIndex], prices_of_risk: Mapping[str, float | PiecewiseConstant],
                premia: Mapping[str, float], rates: RatesModel) -> tuple[IndexRecord, ...]:
        """Every index as its calibration record (the first is the core)."""
        return tuple(index_record(i, prices_of_risk[i.name], premia.get(i.name), rates, core=k == 0)
                     for k, i in enumerate(indices))

    def parameters_json(self, records: Sequence[IndexRecord],
                        rates_price_of_risk: float | PiecewiseConstant) -> tuple[dict[str, Any], dict[str, Any]]:
        """``(core, further)``: the core index's part of ``parameters`` (``equity`` and
        ``market_prices_of_risk``, written before the real-world view) and the others'
        (``indices``, written with the parts)."""
        return (core_index_parameters(records[0], schedule_json(rates_price_of_risk)),
                further_index_parameters(records[1:]))

    def from_records(self, records: Sequence[IndexRecord], with_rates: Any
                     ) -> tuple[tuple[TotalReturnIndex, ...], dict[str, float | PiecewiseConstant], dict[str, float]]:
        """The indices of a stored run (core first), their prices of risk and risk premia by
        name; ``with_rates(name)``: a further index's correlation with the rate driver(s) from
        the driver correlation (``None``: no driver correlation recorded)."""
        indices: list[TotalReturnIndex] = []
        lams: dict[str, float | PiecewiseConstant] = {}
        premia: dict[str, float] = {}
        for rec in records:
            index, lam = index_from_record(rec, None if rec.core or with_rates is None else with_rates(rec.name))
            indices.append(index)
            lams[index.name] = lam
            if rec.risk_premium is not None:
                premia[index.name] = rec.risk_premium
        return tuple(indices), lams, premia

    # -- the generic hooks

    def column_drivers(self, column: str) -> frozenset[str] | None:
        """``None``: an index column loads on the rate drivers too; :meth:`column_drivers_on`."""
        return None

    def column_drivers_on(self, column: str, rates_drivers: Sequence[str]) -> frozenset[str] | None:
        """An index column ``<kind>_<name>`` loads on the rate drivers (its log level integrates
        the short rate) and on its own driver ``<name>``; ``None``: not an index column."""
        for prefix in INDEX_PREFIXES:
            if column.startswith(prefix):
                return frozenset(rates_drivers) | {column[len(prefix):]}
        return None

    def martingale_assets(self, part: GaussianPart, curve: DiscountCurve, columns: Any) -> list[PartAsset]:
        """``[]``: the indices' martingale assets are listed by :mod:`pqflow.validation.assets`."""
        return []

    def describe(self, section: IndexSpec) -> str:
        what = "core equity" if section.core else f"{section.kind} index"
        return f"total-return {what} {section.name!r}"
