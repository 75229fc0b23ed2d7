"""``calibration.json``: the one reader and writer of a run's calibration record.

The file is written by :func:`write_calibration_file` from the content the calibration builds
(``Calibration.to_json``), with ``format_version`` put in front; nothing else changes a byte.
Every reader goes through :func:`read_calibration_file` (or :func:`calibration_record` for a
record already read) and gets a :class:`CalibrationRecord`: the top-level sections, and typed
views of what the checks, the report and the command line read (rates, core equity, instruments,
fit records). The content of a model part (indices, inflation, credit, Heston indices, the
driver correlation) is handed to its owner in ``calibration/`` as the nested object it wrote.

Versions: a file without ``format_version`` is version 1 (every run written before the field
existed); a version this pqflow does not know is refused with the file's name, never guessed.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pqflow.errors import ConfigError
from pqflow.storage.calibration_sections import (
    CorrelationFitRecord,
    CreditFitRecord,
    CreditRecord,
    CurveFitRecord,
    DriverCorrelationRecord,
    EquityOptionQuoteRecord,
    ExpectedShortRateRecord,
    FitEntry,
    HestonFitRecord,
    HestonIndices,
    PricesOfRiskRecord,
    RatesFitRecord,
    RealWorldViewRecord,
    SwaptionQuoteRecord,
    correlation_fit_record,
    credit_fit_record,
    credit_record,
    curve_fit_record,
    driver_correlation_record,
    expected_short_rate_record,
    fit_entry,
    heston_fit_records,
    heston_indices_record,
    instrument_quotes,
    prices_of_risk_record,
    rates_fit_record,
    real_world_view_record,
)
from pqflow.storage.jsonio import read_json, write_json_atomic

__all__ = [
    "CALIBRATION_FILE",
    "PLUGIN_PARTS_KEY",
    "plugin_part_entry",
    "plugin_part_fields",
    "FORMAT_VERSION",
    "CalibrationRecord",
    "HullWhiteRecord",
    "G2ppRecord",
    "IndexRecord",
    "core_index_parameters",
    "further_index_parameters",
    "calibration_path",
    "calibration_content",
    "calibration_document",
    "calibration_record",
    "read_calibration_file",
    "write_calibration_file",
]

CALIBRATION_FILE = "calibration.json"
#: The version this pqflow writes and the newest it reads.
FORMAT_VERSION = 1
_VERSION_KEY = "format_version"
#: the ``parameters`` key holding the registered part plug-ins, by section: each entry
#: ``{"parameters": <the kind's to_json>, "market_prices_of_risk": {driver: schedule}}``
PLUGIN_PARTS_KEY = "plugin_parts"
_RATES_MODELS = ("hull_white", "g2pp")


@dataclass(frozen=True, kw_only=True)
class HullWhiteRecord:
    """Hull-White one-factor parameters as recorded (``parameters.hull_white``)."""

    mean_reversion: float
    volatility: float


@dataclass(frozen=True, kw_only=True)
class G2ppRecord:
    """G2++ parameters as recorded (``parameters.g2pp``)."""

    a: float
    sigma: float
    b: float
    eta: float
    rho: float


@dataclass(frozen=True, kw_only=True)
class IndexRecord:
    """Every total-return index as recorded, the core equity and each further index alike.

    The file keeps its layout: the core index is ``parameters.equity`` (``dividend_yield``,
    ``correlation_with_rates`` and under G2++ ``correlation_with_rate_factors``) with its price of
    risk at ``parameters.market_prices_of_risk.equity`` and its risk premium in the inputs
    (``real_world.equity_risk_premium``); each further index is an entry of
    ``parameters.indices`` (``kind``, ``income_yield``, ``risk_premium``,
    ``market_price_of_risk``). ``volatility`` and ``market_price_of_risk`` are stored schedules
    (a number or ``{knots, values}``). ``core`` marks the core index (first in
    :attr:`CalibrationRecord.indices`)."""

    name: str
    kind: str
    level: float
    income_yield: float
    volatility: Any
    market_price_of_risk: Any = None
    risk_premium: float | None = None
    correlation_with_rates: float | None = None
    correlation_with_rate_factors: tuple[float, ...] | None = None
    core: bool = False

    @property
    def dividend_yield(self) -> float:
        """The income yield (the core equity's ``dividend_yield``)."""
        return self.income_yield

    @property
    def column(self) -> str:
        from pqflow.storage.names import index_column

        return index_column(self.kind, self.name)


def core_index_parameters(index: IndexRecord, rates_price_of_risk: Any) -> dict[str, Any]:
    """The core index's part of ``parameters``, in file order: ``equity``, then
    ``market_prices_of_risk`` (the rates' stored schedule and the core index's)."""
    return {"equity": _core_index_entry(index), "market_prices_of_risk": _prices_of_risk_entry(rates_price_of_risk,
                                                                                                index)}


def further_index_parameters(indices: Sequence[IndexRecord]) -> dict[str, Any]:
    """``parameters.indices`` for the further indices (nothing when there are none)."""
    return {"indices": [_further_index_entry(i) for i in indices]} if indices else {}


def _core_index_entry(index: IndexRecord) -> dict[str, Any]:
    return {
        "name": index.name,
        "level": index.level,
        "dividend_yield": index.income_yield,
        "volatility": index.volatility,
        "correlation_with_rates": index.correlation_with_rates,
        **({"correlation_with_rate_factors": list(index.correlation_with_rate_factors)}
           if index.correlation_with_rate_factors else {}),
    }


def _further_index_entry(index: IndexRecord) -> dict[str, Any]:
    return {
        "name": index.name,
        "kind": index.kind,
        "level": index.level,
        "income_yield": index.income_yield,
        "volatility": index.volatility,
        "risk_premium": index.risk_premium,
        "market_price_of_risk": index.market_price_of_risk,
    }


def _prices_of_risk_entry(rates: Any, core: IndexRecord) -> dict[str, Any]:
    return {
        "rates": rates,
        "equity": core.market_price_of_risk,
        "note": "deterministic; W^Q = W^P + int lambda dt on each correlated driver; "
        "a schedule is {knots, values}: value i holds from knot i to knot i+1",
    }


@dataclass(frozen=True, kw_only=True)
class CalibrationRecord:
    """A ``calibration.json`` read and checked for its version. ``source`` names the file in
    every error; a section the file does not carry reads as empty (``{}`` / ``None``), a value a
    reader needs and the file lacks raises :class:`~pqflow.errors.ConfigError` naming the key."""

    source: str
    format_version: int
    data: dict[str, Any] = field(repr=False)

    # ------------------------------------------------------------------ top level

    def required(self, key: str) -> Any:
        """A top-level value the reader cannot do without (error naming the file and key)."""
        return self._need(self.data, key)

    @property
    def required_parameters(self) -> dict[str, Any]:
        return self._need(self.data, "parameters")

    @property
    def pqflow_version(self) -> str | None:
        return self.data.get("pqflow_version")

    @property
    def valuation_date(self) -> str | None:
        return self.data.get("valuation_date")

    @property
    def horizon_years(self) -> float:
        return float(self._need(self.data, "horizon_years"))

    @property
    def inputs_sha256(self) -> str | None:
        return self.data.get("inputs_sha256")

    @property
    def inputs(self) -> dict[str, Any]:
        """The configuration's inputs as recorded (its own form, written by ``config/``)."""
        return self.data.get("inputs") or {}

    @property
    def parameters(self) -> dict[str, Any]:
        return self.data.get("parameters") or {}

    @property
    def fit(self) -> dict[str, Any]:
        """One fit record per part (``curve``, ``hull_white``/``g2pp``, ``equity``, ...)."""
        return self.data.get("fit") or {}

    def part_fit(self, part: str) -> dict[str, Any]:
        return self.fit.get(part) or {}

    @property
    def has_instruments(self) -> bool:
        return "instruments" in self.data and self.data["instruments"] is not None

    @property
    def instruments(self) -> dict[str, Any]:
        return self.data.get("instruments") or {}

    def instrument_list(self, kind: str) -> list[dict[str, Any]]:
        """A part kind's instruments as recorded (inflation's ``inflation_caps``; empty if none):
        their content is the kind's. The rates' and indices' quotes are :attr:`swaptions` and
        :attr:`equity_options`."""
        return list(self.instruments.get(kind) or [])

    @property
    def swaptions(self) -> tuple[SwaptionQuoteRecord, ...]:
        """The calibration swaptions (``instruments.swaptions``), typed; empty if none."""
        return instrument_quotes(self.instruments, self.source)[0]

    @property
    def equity_options(self) -> tuple[EquityOptionQuoteRecord, ...]:
        """The calibration index options (``instruments.equity_options``), typed; empty if none."""
        return instrument_quotes(self.instruments, self.source)[1]

    @property
    def expected_short_rate(self) -> ExpectedShortRateRecord | None:
        """The model's expected short rate under both measures (and the house-view target);
        ``None`` when the file records none."""
        data = self.data.get("expected_short_rate")
        return expected_short_rate_record(data, self.source) if data else None

    @property
    def equity_risk_premium(self) -> float | None:
        """The real-world input ``real_world.equity_risk_premium``, if recorded."""
        value = (self.inputs.get("real_world") or {}).get("equity_risk_premium")
        return None if value is None else float(value)

    # ------------------------------------------------------------------ parameters

    @property
    def curve(self) -> dict[str, Any]:
        """Today's curve in its stored form (``market.serialize.curve_from_json`` reads it)."""
        return self._need(self._need(self.data, "parameters"), "curve", "parameters")

    @property
    def stored_curve(self) -> dict[str, Any]:
        """The stored curve, ``{}`` when the file has none (for views that show what exists)."""
        return self.parameters.get("curve") or {}

    @property
    def rates_model(self) -> str:
        """``hull_white`` or ``g2pp`` (a file that does not say holds Hull-White)."""
        par = self.parameters
        model = par.get("rates_model") or ("g2pp" if "g2pp" in par else "hull_white")
        if model not in _RATES_MODELS:
            raise ConfigError(f"{self.source}: parameters.rates_model {model!r} is not one of {_RATES_MODELS}")
        return str(model)

    @property
    def has_rates(self) -> bool:
        return "g2pp" in self.parameters or "hull_white" in self.parameters

    @property
    def hull_white(self) -> HullWhiteRecord | None:
        hw = self.parameters.get("hull_white")
        if hw is None:
            return None
        where = "parameters.hull_white"
        return HullWhiteRecord(mean_reversion=float(self._need(hw, "mean_reversion", where)),
                               volatility=float(self._need(hw, "volatility", where)))

    @property
    def g2pp(self) -> G2ppRecord | None:
        g = self.parameters.get("g2pp")
        if g is None:
            return None
        return G2ppRecord(**{k: float(self._need(g, k, "parameters.g2pp")) for k in ("a", "sigma", "b", "eta", "rho")})

    @property
    def rates_parameters(self) -> dict[str, Any]:
        """The recorded rates section (``hull_white`` or ``g2pp``) as stored, ``{}`` if none."""
        return self.parameters.get("g2pp") or self.parameters.get("hull_white") or {}

    @property
    def has_core_index(self) -> bool:
        return bool(self.parameters.get("equity"))

    @property
    def core_index(self) -> IndexRecord:
        """The core index (``parameters.equity``, its price of risk and risk premium)."""
        eq = self._need(self._need(self.data, "parameters"), "equity", "parameters")
        where = "parameters.equity"
        factors = eq.get("correlation_with_rate_factors")
        return IndexRecord(
            name=str(self._need(eq, "name", where)),
            kind="equity",
            level=float(self._need(eq, "level", where)),
            income_yield=float(self._need(eq, "dividend_yield", where)),
            volatility=self._need(eq, "volatility", where),
            market_price_of_risk=self._core_price_of_risk(),
            risk_premium=self.equity_risk_premium,
            correlation_with_rates=float(self._need(eq, "correlation_with_rates", where)),
            correlation_with_rate_factors=None if factors is None else tuple(float(v) for v in factors),
            core=True,
        )

    @property
    def core_index_name(self) -> str | None:
        """The core index's name, or ``None`` when the file records none."""
        name = (self.parameters.get("equity") or {}).get("name")
        return None if name is None else str(name)

    @property
    def further_indices(self) -> tuple[IndexRecord, ...]:
        """The indices beside the core one (``parameters.indices``), in model order."""
        out = []
        for i, item in enumerate(self.parameters.get("indices") or []):
            where = f"parameters.indices[{i}]"
            out.append(IndexRecord(
                name=str(self._need(item, "name", where)),
                kind=str(self._need(item, "kind", where)),
                level=float(self._need(item, "level", where)),
                income_yield=float(self._need(item, "income_yield", where)),
                volatility=self._need(item, "volatility", where),
                market_price_of_risk=self._need(item, "market_price_of_risk", where),
                risk_premium=float(self._need(item, "risk_premium", where)),
                **self._rate_correlation(str(item["name"])),
            ))
        return tuple(out)

    def _rate_correlation(self, name: str) -> dict[str, Any]:
        """A further index's correlation with the rate driver(s), from the driver correlation:
        ``correlation_with_rates`` (Hull-White) or ``correlation_with_rate_factors`` (G2++)."""
        corr = self.driver_correlation
        if corr is None or name not in corr.drivers:
            return {}
        drivers, matrix = list(corr.drivers), corr.matrix
        row = matrix[drivers.index(name)]
        if "rates" in drivers:
            return {"correlation_with_rates": float(row[drivers.index("rates")])}
        if "rates_x" in drivers and "rates_y" in drivers:
            return {"correlation_with_rate_factors": (float(row[drivers.index("rates_x")]),
                                                      float(row[drivers.index("rates_y")]))}
        return {}

    def index(self, name: str | None = None) -> IndexRecord:
        """The index of that name (default: the core index); an error names the recorded ones."""
        if name is None:
            return self.core_index
        for rec in self.indices:
            if rec.name == name:
                return rec
        raise ConfigError(f"{self.source}: no index {name!r} recorded (has: "
                          f"{', '.join(r.name for r in self.indices) or 'none'})")

    @property
    def indices(self) -> tuple[IndexRecord, ...]:
        """Every total-return index of the run, typed: the core one first (when recorded), then
        the further ones in model order."""
        return ((self.core_index,) if self.has_core_index else ()) + self.further_indices

    def _core_price_of_risk(self) -> Any:
        mpr = self.market_prices_of_risk
        return None if mpr is None else mpr.equity

    @property
    def market_prices_of_risk(self) -> PricesOfRiskRecord | None:
        """The rates' and the core index's prices of risk, ``None`` when the file records none."""
        data = self.parameters.get("market_prices_of_risk")
        return prices_of_risk_record(data, self.source) if data else None

    @property
    def rates_price_of_risk(self) -> Any:
        """The rates' market price of risk as stored (a number or ``{knots, values}``)."""
        mpr = self._need(self._need(self.data, "parameters"), "market_prices_of_risk", "parameters")
        return self._need(mpr, "rates", "parameters.market_prices_of_risk")

    @property
    def real_world_view(self) -> RealWorldViewRecord:
        """How the real-world rates were set (every field ``None`` when the file records no view)."""
        data = self.parameters.get("real_world_view")
        return real_world_view_record(data, self.source) if data else RealWorldViewRecord()

    # model parts: the nested object their owner in calibration/ wrote (None when absent)

    @property
    def inflation(self) -> dict[str, Any] | None:
        return self.parameters.get("inflation")

    @property
    def credit(self) -> CreditRecord | None:
        """The credit part (``None`` when the file has none)."""
        data = self.parameters.get("credit")
        return None if data is None else credit_record(data, self.source)

    @property
    def stochastic_volatility(self) -> HestonIndices:
        """Heston indices by name (empty when none)."""
        return heston_indices_record(self.parameters.get("stochastic_volatility"), self.source)

    @property
    def plugin_parts(self) -> dict[str, dict[str, Any]]:
        """The part plug-ins' entries by section (``{}`` when none)."""
        return dict(self.parameters.get(PLUGIN_PARTS_KEY) or {})

    @property
    def driver_correlation(self) -> DriverCorrelationRecord | None:
        data = self.parameters.get("driver_correlation")
        return None if data is None else driver_correlation_record(data, self.source)

    # fit records of the credit, Heston, correlation, curve and rates parts

    @property
    def curve_fit(self) -> CurveFitRecord:
        return curve_fit_record(self.fit.get("curve"), self.source)

    @property
    def rates_fit(self) -> RatesFitRecord:
        """The fit of the recorded rates model (``fit.hull_white`` or ``fit.g2pp``)."""
        model = self.rates_model
        return rates_fit_record(self.fit.get(model), self.source, f"fit.{model}")

    def rates_fit_of(self, model: str) -> RatesFitRecord:
        """The swaption fit of ``hull_white`` or ``g2pp`` (empty when not recorded)."""
        return rates_fit_record(self.fit.get(model), self.source, f"fit.{model}")

    @property
    def credit_fit(self) -> CreditFitRecord:
        return credit_fit_record(self.fit.get("credit"), self.source)

    @property
    def heston_fits(self) -> dict[str, HestonFitRecord]:
        return heston_fit_records(self.fit.get("heston"), self.source)

    @property
    def correlation_fit(self) -> CorrelationFitRecord:
        return correlation_fit_record(self.fit.get("correlation"), self.source)

    def fit_entries(self) -> list[FitEntry]:
        """Every fit record as stored, in file order, for views that list them all: an index's
        fit is one entry (``index <name>``), credit's summary and each rating's another
        (``credit <rating>``); the Heston smile fits are left to :attr:`heston_fits`."""
        out: list[FitEntry] = []
        for name, fit in self.fit.items():
            if name == "indices" and isinstance(fit, Mapping):
                out += [fit_entry(f"index {k}", v) for k, v in fit.items() if isinstance(v, Mapping)]
            elif name == "heston":
                continue
            elif name == "credit" and isinstance(fit, Mapping):
                out.append(fit_entry("credit", {k: v for k, v in fit.items() if k != "ratings"}))
                out += [fit_entry(f"credit {r.get('rating')}", r) for r in fit.get("ratings", [])
                        if isinstance(r, Mapping)]
            elif isinstance(fit, Mapping):
                out.append(fit_entry(name, fit))
        return out

    # ------------------------------------------------------------------ helpers

    def _need(self, obj: Any, key: str, where: str = "") -> Any:
        name = f"{where}.{key}" if where else key
        if not isinstance(obj, Mapping):
            raise ConfigError(f"{self.source}: {where or 'the file'} is not a JSON object")
        if key not in obj or obj[key] is None:
            raise ConfigError(f"{self.source}: not a pqflow calibration file (no {name})")
        return obj[key]


def plugin_part_entry(parameters: dict[str, Any], prices_of_risk: dict[str, Any]) -> dict[str, Any]:
    """One part plug-in's ``calibration.json`` entry: its kind's form and its prices of risk."""
    return {"parameters": parameters, "market_prices_of_risk": prices_of_risk}


def plugin_part_fields(entry: dict[str, Any], source: str | Path, section: str) -> tuple[dict[str, Any],
                                                                                        dict[str, Any]]:
    """``(parameters, market_prices_of_risk)`` of an entry; a malformed one names file and key."""
    try:
        return dict(entry["parameters"]), dict(entry.get("market_prices_of_risk") or {})
    except (KeyError, TypeError, ValueError):
        raise ConfigError(f"{source}: parameters.{PLUGIN_PARTS_KEY}.{section} is not a part entry") from None


def calibration_path(run_dir: str | Path) -> Path:
    """Where a run (or a sensitivity set) keeps its calibration record."""
    return Path(run_dir) / CALIBRATION_FILE


def calibration_record(data: Any, source: str | Path) -> CalibrationRecord:
    """Check the version of a calibration record already read (``source`` names it in errors)."""
    source = str(source)
    if not isinstance(data, Mapping):
        raise ConfigError(f"{source}: not a pqflow calibration file (not a JSON object)")
    version = data.get(_VERSION_KEY, 1)
    if isinstance(version, bool) or not isinstance(version, int) or version < 1:
        raise ConfigError(f"{source}: {_VERSION_KEY} {version!r} is not a calibration file version")
    if version > FORMAT_VERSION:
        raise ConfigError(
            f"{source}: calibration file format_version {version} is newer than this pqflow reads "
            f"(up to {FORMAT_VERSION}); use the pqflow that wrote it or calibrate again"
        )
    return CalibrationRecord(source=source, format_version=version, data=dict(data))


def read_calibration_file(path: str | Path) -> CalibrationRecord:
    """Read ``calibration.json`` (a run directory's, or any path to one)."""
    path = Path(path)
    if path.is_dir():
        path = calibration_path(path)
    try:
        data = read_json(path)
    except FileNotFoundError:
        raise ConfigError(f"{path}: calibration file not found") from None
    except ValueError as exc:  # json.JSONDecodeError, bad UTF-8
        raise ConfigError(f"{path}: not a pqflow calibration file ({exc})") from None
    return calibration_record(data, path)


def calibration_document(
    *,
    pqflow_version: str,
    valuation_date: str,
    horizon_years: float,
    inputs_sha256: str,
    inputs: Mapping[str, Any],
    parameters: Mapping[str, Any],
    fit: Mapping[str, Any],
    instruments: Mapping[str, Any],
    expected_short_rate: Mapping[str, Any],
) -> dict[str, Any]:
    """The top level of a calibration record, in file order (``calibration/`` fills the
    sections: ``parameters`` holds each model part's own form)."""
    return {
        "pqflow_version": pqflow_version,
        "valuation_date": valuation_date,
        "horizon_years": horizon_years,
        "inputs_sha256": inputs_sha256,
        "inputs": inputs,
        "parameters": parameters,
        "fit": fit,
        "instruments": instruments,
        "expected_short_rate": expected_short_rate,
    }


def calibration_content(content: Mapping[str, Any]) -> dict[str, Any]:
    """What is written: ``format_version`` first, then ``content`` in its own key order."""
    rest = {k: v for k, v in content.items() if k != _VERSION_KEY}
    return {_VERSION_KEY: FORMAT_VERSION, **rest}


def write_calibration_file(path: str | Path, content: Mapping[str, Any]) -> Path:
    """Write a calibration record atomically to ``path`` (see :func:`calibration_path`)."""
    return write_json_atomic(Path(path), calibration_content(content))
