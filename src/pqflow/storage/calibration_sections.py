"""Typed records of the nested sections of ``calibration.json`` that the checks, the report and
the command line read: the credit part, the Heston indices, the driver correlation, the fit
records of the curve, the rates model, credit, the Heston smile and the correlation, and the
real-world side (``expected_short_rate``, ``parameters.real_world_view``,
``parameters.market_prices_of_risk``), and the rates' and indices' calibration instruments
(``instruments.swaptions``, ``instruments.equity_options``; a part kind's own instruments, such
as inflation's caps, stay its kind's content).

Each record is read from the stored form by a ``*_record`` function given the file's name
(``source``) and the key path of the section (``where``): a value the record needs and the file
lacks raises :class:`~pqflow.errors.ConfigError` naming both; an optional value the writer does
not always put reads as ``None``. The layout of the file is not changed by reading it: the
owners in ``calibration/`` and ``models/`` still write the same dicts (``credit_to_json``,
``heston_indices_to_json``, ``DriverCorrelation.to_json``, the fits' ``to_json``).

Fit records whose shape depends on the method (the curve's, the rates fit's rows) keep the
stored mapping as ``fields`` for views that list every entry, with named fields for what the
readers use.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from typing import Any

from pqflow.errors import ConfigError

__all__ = [
    "CirRecord",
    "HazardRecord",
    "CreditRatingRecord",
    "CreditRecord",
    "HestonPricesOfRiskRecord",
    "HestonIndexRecord",
    "HestonIndices",
    "DriverCorrelationRecord",
    "LlfrTermRecord",
    "CurveFitRecord",
    "SwaptionFitRowRecord",
    "RatesFitRecord",
    "SpreadFitRowRecord",
    "CreditRatingFitRecord",
    "CreditFitRecord",
    "HestonFitRowRecord",
    "HestonFitRecord",
    "CorrelationFitRecord",
    "FitEntry",
    "credit_record",
    "heston_indices_record",
    "driver_correlation_record",
    "curve_fit_record",
    "rates_fit_record",
    "credit_fit_record",
    "heston_fit_records",
    "correlation_fit_record",
    "fit_entry",
    "HouseViewTargetRecord",
    "ExpectedShortRateRecord",
    "RealWorldViewRecord",
    "PricesOfRiskRecord",
    "expected_short_rate_record",
    "real_world_view_record",
    "prices_of_risk_record",
    "SwaptionQuoteRecord",
    "EquityOptionQuoteRecord",
    "swaption_quote_records",
    "equity_option_quote_records",
    "instrument_quotes",
]


# ---------------------------------------------------------------------------------- reading

def _obj(source: str, obj: Any, where: str) -> Mapping[str, Any]:
    if not isinstance(obj, Mapping):
        raise ConfigError(f"{source}: {where} is not a JSON object")
    return obj


def _need(source: str, obj: Mapping[str, Any], key: str, where: str) -> Any:
    if key not in obj or obj[key] is None:
        raise ConfigError(f"{source}: not a pqflow calibration file (no {where}.{key})")
    return obj[key]


def _num(source: str, obj: Mapping[str, Any], key: str, where: str) -> float:
    value = _need(source, obj, key, where)
    try:
        return float(value)
    except (TypeError, ValueError):
        raise ConfigError(f"{source}: {where}.{key} is not a number ({value!r})") from None


def _opt_num(obj: Mapping[str, Any], key: str) -> float | None:
    value = obj.get(key)
    if value is None or isinstance(value, bool):
        return None
    try:
        return float(value)
    except (TypeError, ValueError):
        return None


def _opt_int(obj: Mapping[str, Any], key: str) -> int | None:
    value = obj.get(key)
    return value if isinstance(value, int) and not isinstance(value, bool) else None


def _opt_str(obj: Mapping[str, Any], key: str) -> str | None:
    value = obj.get(key)
    return None if value is None else str(value)


def _list(source: str, obj: Mapping[str, Any], key: str, where: str) -> list[Any]:
    value = _need(source, obj, key, where)
    if not isinstance(value, list):
        raise ConfigError(f"{source}: {where}.{key} is not a list")
    return value


def _floats(source: str, values: Any, where: str) -> tuple[float, ...]:
    try:
        return tuple(float(v) for v in values)
    except (TypeError, ValueError):
        raise ConfigError(f"{source}: {where} is not a list of numbers") from None


def _rows(obj: Mapping[str, Any], key: str = "rows") -> tuple[Mapping[str, Any], ...]:
    rows = obj.get(key)
    if not isinstance(rows, list):
        return ()
    return tuple(r for r in rows if isinstance(r, Mapping))


# ---------------------------------------------------------------------------------- credit

@dataclass(frozen=True, kw_only=True)
class CirRecord:
    """A rating's CIR intensity parameters (``...ratings[i].cir``)."""

    mean_reversion: float
    long_run_mean: float
    volatility: float
    initial: float


@dataclass(frozen=True, kw_only=True)
class HazardRecord:
    """A rating's bootstrapped hazard curve (``...ratings[i].hazard``)."""

    knots: tuple[float, ...]
    hazards: tuple[float, ...]


@dataclass(frozen=True, kw_only=True)
class CreditRatingRecord:
    """One rating of the credit part (``parameters.credit.ratings[i]``)."""

    name: str
    recovery: float
    price_of_risk: float
    cir: CirRecord
    hazard: HazardRecord


@dataclass(frozen=True, kw_only=True)
class CreditRecord:
    """The credit part (``parameters.credit``): CIR++ intensities by rating."""

    bond_maturities: tuple[float, ...]
    substeps_per_year: int
    correlation: tuple[tuple[float, ...], ...] | None
    ratings: tuple[CreditRatingRecord, ...]

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(r.name for r in self.ratings)

    @property
    def priced(self) -> bool:
        """Whether a rating carries a non-zero price of risk (the real-world density then has a
        credit part)."""
        return any(r.price_of_risk != 0.0 for r in self.ratings)


def credit_record(data: Any, source: str, where: str = "parameters.credit") -> CreditRecord:
    """The credit part as recorded (``ConfigError`` naming file and key if malformed)."""
    obj = _obj(source, data, where)
    ratings = []
    for i, item in enumerate(_list(source, obj, "ratings", where)):
        at = f"{where}.ratings[{i}]"
        r = _obj(source, item, at)
        cir = _obj(source, _need(source, r, "cir", at), f"{at}.cir")
        hazard = _obj(source, _need(source, r, "hazard", at), f"{at}.hazard")
        ratings.append(CreditRatingRecord(
            name=str(_need(source, r, "name", at)),
            recovery=_num(source, r, "recovery", at),
            price_of_risk=_num(source, r, "price_of_risk", at),
            cir=CirRecord(**{k: _num(source, cir, k, f"{at}.cir")
                             for k in ("mean_reversion", "long_run_mean", "volatility", "initial")}),
            hazard=HazardRecord(knots=_floats(source, _need(source, hazard, "knots", f"{at}.hazard"),
                                              f"{at}.hazard.knots"),
                                hazards=_floats(source, _need(source, hazard, "hazards", f"{at}.hazard"),
                                                f"{at}.hazard.hazards")),
        ))
    corr = obj.get("correlation")
    matrix = None if corr is None else tuple(_floats(source, row, f"{where}.correlation") for row in corr)
    substeps = _need(source, obj, "substeps_per_year", where)
    if isinstance(substeps, bool) or not isinstance(substeps, int):
        raise ConfigError(f"{source}: {where}.substeps_per_year is not a whole number ({substeps!r})")
    return CreditRecord(
        bond_maturities=_floats(source, _list(source, obj, "bond_maturities", where), f"{where}.bond_maturities"),
        substeps_per_year=substeps, correlation=matrix, ratings=tuple(ratings),
    )


# ---------------------------------------------------------------------------------- Heston

@dataclass(frozen=True, kw_only=True)
class HestonPricesOfRiskRecord:
    """A Heston index's prices of risk and the real-world kappa and theta they imply."""

    equity: float
    variance: float
    kappa_real_world: float
    theta_real_world: float


@dataclass(frozen=True, kw_only=True)
class HestonIndexRecord:
    """One Heston index (``parameters.stochastic_volatility.<name>``)."""

    name: str
    model: str
    v0: float
    kappa: float
    theta: float
    xi: float
    rho: float
    column: str
    level: float
    income_yield: float
    prices_of_risk: HestonPricesOfRiskRecord
    loadings: tuple[tuple[str, float], ...]
    explained: float
    rates_correlation: float
    substeps_per_year: int


_HESTON_PARAMS = ("v0", "kappa", "theta", "xi", "rho")


def _heston_index(source: str, name: str, data: Any, where: str) -> HestonIndexRecord:
    at = f"{where}.{name}"
    e = _obj(source, data, at)
    model = str(_need(source, e, "model", at))
    if model != "heston":
        raise ConfigError(f"{source}: {at}.model {model!r} is not a known stochastic-volatility model (heston)")
    lam = _obj(source, _need(source, e, "prices_of_risk", at), f"{at}.prices_of_risk")
    loadings = []
    for i, pair in enumerate(_list(source, e, "loadings", at)):
        if not isinstance(pair, (list, tuple)) or len(pair) != 2:
            raise ConfigError(f"{source}: {at}.loadings[{i}] is not a [driver, loading] pair")
        try:
            loadings.append((str(pair[0]), float(pair[1])))
        except (TypeError, ValueError):
            raise ConfigError(f"{source}: {at}.loadings[{i}] is not a [driver, loading] pair") from None
    substeps = _need(source, e, "substeps_per_year", at)
    if isinstance(substeps, bool) or not isinstance(substeps, int):
        raise ConfigError(f"{source}: {at}.substeps_per_year is not a whole number ({substeps!r})")
    return HestonIndexRecord(
        name=name, model=model, **{k: _num(source, e, k, at) for k in _HESTON_PARAMS},
        column=str(_need(source, e, "column", at)), level=_num(source, e, "level", at),
        income_yield=_num(source, e, "income_yield", at),
        prices_of_risk=HestonPricesOfRiskRecord(**{
            k: _num(source, lam, k, f"{at}.prices_of_risk")
            for k in ("equity", "variance", "kappa_real_world", "theta_real_world")}),
        loadings=tuple(loadings), explained=_num(source, e, "explained", at),
        rates_correlation=_num(source, e, "rates_correlation", at), substeps_per_year=substeps,
    )


@dataclass(frozen=True)
class HestonIndices(Mapping[str, HestonIndexRecord]):
    """The Heston indices by name (``parameters.stochastic_volatility``); an entry is read (and
    checked) when it is asked for, so listing the names never fails on an entry."""

    source: str
    entries: Mapping[str, Any] = field(default_factory=dict, repr=False)
    where: str = "parameters.stochastic_volatility"

    def __getitem__(self, name: str) -> HestonIndexRecord:
        return _heston_index(self.source, name, self.entries[name], self.where)

    def __iter__(self) -> Iterator[str]:
        return iter(self.entries)

    def __len__(self) -> int:
        return len(self.entries)

    @property
    def columns(self) -> frozenset[str]:
        """The index columns of the Heston indices."""
        return frozenset(h.column for h in self.values())


def heston_indices_record(data: Any, source: str, where: str = "parameters.stochastic_volatility") -> HestonIndices:
    """The Heston indices as recorded (``{}`` when none)."""
    return HestonIndices(source=source, entries=dict(_obj(source, data or {}, where)), where=where)


# ---------------------------------------------------------------------------------- correlation

@dataclass(frozen=True, kw_only=True)
class DriverCorrelationRecord:
    """The Gaussian drivers' correlation (``parameters.driver_correlation``)."""

    drivers: tuple[str, ...]
    matrix: tuple[tuple[float, ...], ...]

    def pairs(self) -> Iterator[tuple[str, str, float]]:
        """Every pair above the diagonal, in matrix order (a short row yields what it has)."""
        for i, a in enumerate(self.drivers):
            for j in range(i + 1, len(self.drivers)):
                if i < len(self.matrix) and j < len(self.matrix[i]):
                    yield a, self.drivers[j], self.matrix[i][j]


def driver_correlation_record(data: Any, source: str,
                              where: str = "parameters.driver_correlation") -> DriverCorrelationRecord:
    obj = _obj(source, data, where)
    drivers = tuple(str(d) for d in _list(source, obj, "drivers", where))
    matrix = tuple(_floats(source, row, f"{where}.matrix") for row in _list(source, obj, "matrix", where))
    return DriverCorrelationRecord(drivers=drivers, matrix=matrix)


# ---------------------------------------------------------------------------------- fit records

@dataclass(frozen=True, kw_only=True)
class FitEntry:
    """A fit record as stored, for views that list every entry: ``fields`` (the scalars and
    anything else but the rows), ``rows`` (one mapping per instrument) and the year-on-year cap
    fit's entry where the record has one."""

    name: str
    fields: Mapping[str, Any]
    rows: tuple[Mapping[str, Any], ...]
    caps: FitEntry | None = None


def fit_entry(name: str, data: Mapping[str, Any]) -> FitEntry:
    caps = data.get("caps")
    return FitEntry(name=name, fields={k: v for k, v in data.items() if k not in ("rows", "caps")},
                    rows=_rows(data),
                    caps=fit_entry(f"{name} caps", caps) if isinstance(caps, Mapping) else None)


@dataclass(frozen=True, kw_only=True)
class LlfrTermRecord:
    """One term of the last liquid forward rate: ``weight x f(forward_from, maturity) = forward``."""

    maturity: float
    weight: float
    forward: float
    forward_from: float


@dataclass(frozen=True, kw_only=True)
class CurveFitRecord:
    """The curve's fit record (``fit.curve``); which values it has depends on the method
    (Smith-Wilson, last liquid forward, typed in): each is ``None`` when not recorded."""

    method: str | None = None
    input_kind: str | None = None
    inputs_used: int | None = None
    coupon_frequency: int | None = None
    credit_risk_adjustment_bp: float | None = None
    ufr: float | None = None
    omega: float | None = None
    last_liquid_point: float | None = None
    alpha: float | None = None
    alpha_floor: float | None = None
    alpha_source: str | None = None
    convergence_point: float | None = None
    forward_at_convergence: float | None = None
    gap_to_omega_bp: float | None = None
    first_smoothing_point: float | None = None
    last_liquid_forward_rate: float | None = None
    llfr_terms: tuple[LlfrTermRecord, ...] = ()
    max_repricing_error: float | None = None

    @property
    def is_last_liquid_forward(self) -> bool:
        return self.method == "last_liquid_forward"


def curve_fit_record(data: Any, source: str, where: str = "fit.curve") -> CurveFitRecord:
    obj = _obj(source, data or {}, where)
    terms = []
    for i, t in enumerate(obj.get("llfr_terms") or []):
        at = f"{where}.llfr_terms[{i}]"
        t = _obj(source, t, at)
        terms.append(LlfrTermRecord(**{k: _num(source, t, k, at)
                                       for k in ("maturity", "weight", "forward", "forward_from")}))
    return CurveFitRecord(
        method=_opt_str(obj, "method"), input_kind=_opt_str(obj, "input_kind"),
        alpha_source=_opt_str(obj, "alpha_source"), llfr_terms=tuple(terms),
        inputs_used=_opt_int(obj, "inputs_used"), coupon_frequency=_opt_int(obj, "coupon_frequency"),
        **{k: _opt_num(obj, k) for k in (
            "credit_risk_adjustment_bp", "ufr", "omega", "last_liquid_point",
            "alpha", "alpha_floor", "convergence_point", "forward_at_convergence", "gap_to_omega_bp",
            "first_smoothing_point", "last_liquid_forward_rate", "max_repricing_error")},
    )


@dataclass(frozen=True, kw_only=True)
class SwaptionFitRowRecord:
    """One swaption of the rates fit: normal vols in bp (``vol_difference_bp`` model - market)."""

    expiry: float
    tenor: float
    market_vol: float
    model_vol: float
    vol_difference_bp: float


@dataclass(frozen=True, kw_only=True)
class RatesFitRecord:
    """The rates model's swaption fit (``fit.hull_white`` / ``fit.g2pp``); ``rmse_bp`` is
    ``None`` when the parameters were typed in; ``rows`` as stored, :attr:`swaptions` typed."""

    rmse_bp: float | None
    rows: tuple[Mapping[str, Any], ...]
    source: str = ""
    where: str = ""

    @property
    def swaptions(self) -> tuple[SwaptionFitRowRecord, ...]:
        return tuple(
            SwaptionFitRowRecord(**{k: _num(self.source, r, k, f"{self.where}.rows[{i}]")
                                    for k in ("expiry", "tenor", "market_vol", "model_vol", "vol_difference_bp")})
            for i, r in enumerate(self.rows)
        )


def rates_fit_record(data: Any, source: str, where: str) -> RatesFitRecord:
    obj = _obj(source, data or {}, where)
    return RatesFitRecord(rmse_bp=_num(source, obj, "rmse_bp", where) if "rmse_bp" in obj else None,
                          rows=_rows(obj), source=source, where=where)


@dataclass(frozen=True, kw_only=True)
class SpreadFitRowRecord:
    """One pillar of a rating's spread fit: the maturity and the market's zero-coupon spread."""

    maturity: float
    market_spread: float


@dataclass(frozen=True, kw_only=True)
class CreditRatingFitRecord:
    """One rating's spread fit (``fit.credit.ratings[i]``); ``rows`` by pillar
    (``maturity``, ``market_spread``, ...)."""

    rating: str
    fitted: tuple[str, ...]
    max_abs_error_bp: float
    min_shift: float
    max_shift: float
    feller_ratio: float
    price_of_risk: float | None
    real_world_long_run_mean: float | None
    market_consistent_long_run_mean: float | None
    rows: tuple[Mapping[str, Any], ...]
    source: str = ""
    where: str = ""

    @property
    def spreads(self) -> tuple[SpreadFitRowRecord, ...]:
        """The pillars' market spreads, in the record's order."""
        return tuple(SpreadFitRowRecord(maturity=_num(self.source, r, "maturity", f"{self.where}.rows[{i}]"),
                                        market_spread=_num(self.source, r, "market_spread",
                                                           f"{self.where}.rows[{i}]"))
                     for i, r in enumerate(self.rows))


@dataclass(frozen=True, kw_only=True)
class CreditFitRecord:
    """The credit fit (``fit.credit``), by rating."""

    ratings: tuple[CreditRatingFitRecord, ...] = ()

    def by_rating(self) -> dict[str, CreditRatingFitRecord]:
        return {r.rating: r for r in self.ratings}


def credit_fit_record(data: Any, source: str, where: str = "fit.credit") -> CreditFitRecord:
    obj = _obj(source, data or {}, where)
    out = []
    for i, item in enumerate(obj.get("ratings") or []):
        at = f"{where}.ratings[{i}]"
        r = _obj(source, item, at)
        out.append(CreditRatingFitRecord(
            rating=str(_need(source, r, "rating", at)),
            fitted=tuple(str(x) for x in (r.get("fitted") or ())),
            max_abs_error_bp=_num(source, r, "max_abs_error_bp", at), min_shift=_num(source, r, "min_shift", at),
            max_shift=_num(source, r, "max_shift", at), feller_ratio=_num(source, r, "feller_ratio", at),
            price_of_risk=_opt_num(r, "price_of_risk"),
            real_world_long_run_mean=_opt_num(r, "real_world_long_run_mean"),
            market_consistent_long_run_mean=_opt_num(r, "market_consistent_long_run_mean"),
            rows=_rows(r), source=source, where=at,
        ))
    return CreditFitRecord(ratings=tuple(out))


@dataclass(frozen=True, kw_only=True)
class HestonFitRowRecord:
    """One quote of a Heston smile fit (``vol_points``: model - market in vol points; the
    weight and the difference are ``None`` where a record does not hold them)."""

    expiry: float
    moneyness: float
    kind: str
    market_vol: float
    model_vol: float
    weight: float | None = None
    vol_points: float | None = None


@dataclass(frozen=True, kw_only=True)
class HestonFitRecord:
    """A Heston index's smile fit (``fit.heston.<name>``)."""

    name: str
    method: str
    v0: float
    kappa: float
    theta: float
    xi: float
    rho: float
    feller_ratio: float
    rmse_vol_points: float
    max_abs_vol_points: float
    at_bounds: tuple[str, ...]
    rows: tuple[HestonFitRowRecord, ...]


def heston_fit_records(data: Any, source: str, where: str = "fit.heston") -> dict[str, HestonFitRecord]:
    """The smile fit of each Heston index, by name (``{}`` when none)."""
    out = {}
    for name, item in _obj(source, data or {}, where).items():
        at = f"{where}.{name}"
        h = _obj(source, item, at)
        par = _obj(source, _need(source, h, "parameters", at), f"{at}.parameters")
        rows = []
        for i, r in enumerate(_list(source, h, "rows", at)):
            rat = f"{at}.rows[{i}]"
            r = _obj(source, r, rat)
            rows.append(HestonFitRowRecord(
                kind=str(_need(source, r, "kind", rat)),
                **{k: _num(source, r, k, rat) for k in ("expiry", "moneyness", "market_vol", "model_vol")},
                weight=_opt_num(r, "weight"), vol_points=_opt_num(r, "vol_points")))
        out[str(name)] = HestonFitRecord(
            name=str(name), method=str(_need(source, h, "method", at)),
            **{k: _num(source, par, k, f"{at}.parameters") for k in _HESTON_PARAMS},
            **{k: _num(source, h, k, at) for k in ("feller_ratio", "rmse_vol_points", "max_abs_vol_points")},
            at_bounds=tuple(str(x) for x in (h.get("at_bounds") or ())), rows=tuple(rows),
        )
    return out


@dataclass(frozen=True, kw_only=True)
class CorrelationFitRecord:
    """The correlation's record (``fit.correlation``): whether the matrix was repaired and how
    far it moved (``frobenius_distance``, when repaired)."""

    repaired: bool = False
    frobenius_distance: float | None = None


def correlation_fit_record(data: Any, source: str, where: str = "fit.correlation") -> CorrelationFitRecord:
    obj = _obj(source, data or {}, where)
    repaired = bool(obj.get("repaired"))
    return CorrelationFitRecord(
        repaired=repaired,
        frobenius_distance=_num(source, obj, "frobenius_distance", where) if repaired else None,
    )


# ---------------------------------------------------------------------------------- real world

@dataclass(frozen=True, kw_only=True)
class HouseViewTargetRecord:
    """The house-view target of the expected paths (``expected_short_rate.target``): the targeted
    ``quantity`` (``short_rate`` or ``zero_yield``), its times, the house view's path and the
    real-world model's (and the market-consistent one's, when recorded)."""

    quantity: str | None
    time: tuple[float, ...]
    house_view: tuple[float, ...]
    real_world: tuple[float, ...]
    market_consistent: tuple[float, ...] | None = None


@dataclass(frozen=True, kw_only=True)
class ExpectedShortRateRecord:
    """The model's expected short rate by measure at whole years (``expected_short_rate``) and,
    when the real world follows a house-view path, that path's target."""

    time: tuple[float, ...]
    market_consistent: tuple[float, ...]
    real_world: tuple[float, ...]
    target: HouseViewTargetRecord | None = None


def expected_short_rate_record(data: Any, source: str,
                               where: str = "expected_short_rate") -> ExpectedShortRateRecord:
    obj = _obj(source, data, where)
    target = None
    raw = obj.get("target")
    if raw:  # a view without a path (a short rate at one year) records no target
        tw = f"{where}.target"
        t = _obj(source, raw, tw)
        mc = t.get("market_consistent")
        target = HouseViewTargetRecord(
            quantity=_opt_str(t, "quantity"),
            time=_floats(source, _list(source, t, "time", tw), f"{tw}.time"),
            house_view=_floats(source, _list(source, t, "house_view", tw), f"{tw}.house_view"),
            real_world=_floats(source, _list(source, t, "real_world", tw), f"{tw}.real_world"),
            market_consistent=None if mc is None else _floats(source, mc, f"{tw}.market_consistent"),
        )
    return ExpectedShortRateRecord(
        time=_floats(source, _list(source, obj, "time", where), f"{where}.time"),
        market_consistent=_floats(source, _list(source, obj, "market_consistent", where),
                                  f"{where}.market_consistent"),
        real_world=_floats(source, _list(source, obj, "real_world", where), f"{where}.real_world"),
        target=target,
    )


@dataclass(frozen=True, kw_only=True)
class RealWorldViewRecord:
    """How the real-world rates were set (``parameters.real_world_view``): its ``kind`` (``path``
    or ``short_rate_at_year``), the targeted quantity (``short_rate`` or ``zero_yield``) and, for
    a zero yield, its maturity. Every field is optional: each kind writes its own."""

    kind: str | None = None
    target: str | None = None
    target_maturity: float | None = None


def real_world_view_record(data: Any, source: str,
                           where: str = "parameters.real_world_view") -> RealWorldViewRecord:
    obj = _obj(source, data, where)
    return RealWorldViewRecord(kind=_opt_str(obj, "kind"), target=_opt_str(obj, "target"),
                               target_maturity=_opt_num(obj, "target_maturity"))


@dataclass(frozen=True, kw_only=True)
class PricesOfRiskRecord:
    """The rates' and the core index's market prices of risk (``parameters.market_prices_of_risk``),
    each as stored: a number or a ``{knots, values}`` schedule (``None`` when not recorded)."""

    rates: Any = None
    equity: Any = None
    note: str | None = None


def prices_of_risk_record(data: Any, source: str,
                          where: str = "parameters.market_prices_of_risk") -> PricesOfRiskRecord:
    obj = _obj(source, data, where)
    return PricesOfRiskRecord(rates=obj.get("rates"), equity=obj.get("equity"), note=_opt_str(obj, "note"))


# ---------------------------------------------------------------------------------- instruments

def _instrument_list(source: str, data: Any, where: str) -> list[Mapping[str, Any]]:
    if data is None:
        return []
    if not isinstance(data, list):
        raise ConfigError(f"{source}: {where} is not a list")
    return [_obj(source, item, f"{where}[{i}]") for i, item in enumerate(data)]


@dataclass(frozen=True, kw_only=True)
class SwaptionQuoteRecord:
    """One calibration swaption (``instruments.swaptions[i]``): expiry, tenor and strike, the
    quote's volatility convention (``normal`` unless stated), shift and payer/receiver kind, the
    market volatility and prices (``None`` when not recorded: a sensitivity's model-only quote)."""

    expiry: float
    tenor: float
    strike: float
    convention: str = "normal"
    shift: float = 0.0
    kind: str = "payer"
    market_vol: float | None = None
    market_price: float | None = None
    model_price: float | None = None
    #: the fit's weight as recorded (a sensitivity's model-only quote carries it over unchanged)
    weight: float = 1.0


def swaption_quote_records(data: Any, source: str,
                           where: str = "instruments.swaptions") -> tuple[SwaptionQuoteRecord, ...]:
    out = []
    for i, q in enumerate(_instrument_list(source, data, where)):
        w = f"{where}[{i}]"
        out.append(SwaptionQuoteRecord(
            expiry=_num(source, q, "expiry", w), tenor=_num(source, q, "tenor", w), strike=_num(source, q, "strike", w),
            convention=str(q.get("convention", "normal")), shift=float(q.get("shift", 0.0) or 0.0),
            kind=str(q.get("kind", "payer")), market_vol=_opt_num(q, "market_vol"),
            market_price=_opt_num(q, "market_price"), model_price=_opt_num(q, "model_price"),
            weight=q.get("weight", 1.0),
        ))
    return tuple(out)


@dataclass(frozen=True, kw_only=True)
class EquityOptionQuoteRecord:
    """One calibration index option (``instruments.equity_options[i]``): expiry and strike, the
    index it is written on (``None``: the core index), call or put, the volatility convention,
    the column kind of its index (``equity`` or ``property``), the market volatility and prices."""

    expiry: float
    strike: float
    index: str | None = None
    kind: str = "call"
    convention: str = "lognormal"
    column_kind: str = "equity"
    market_vol: float | None = None
    market_price: float | None = None
    model_price: float | None = None


def equity_option_quote_records(data: Any, source: str,
                                where: str = "instruments.equity_options") -> tuple[EquityOptionQuoteRecord, ...]:
    out = []
    for i, q in enumerate(_instrument_list(source, data, where)):
        w = f"{where}[{i}]"
        out.append(EquityOptionQuoteRecord(
            expiry=_num(source, q, "expiry", w), strike=_num(source, q, "strike", w), index=_opt_str(q, "index"),
            kind=str(q.get("kind", "call")), convention=str(q.get("convention", "lognormal")),
            column_kind=str(q.get("column_kind", "equity")), market_vol=_opt_num(q, "market_vol"),
            market_price=_opt_num(q, "market_price"), model_price=_opt_num(q, "model_price"),
        ))
    return tuple(out)


def instrument_quotes(
    instruments: Mapping[str, Any], source: str, where: str = "instruments"
) -> tuple[tuple[SwaptionQuoteRecord, ...], tuple[EquityOptionQuoteRecord, ...]]:
    """The swaptions and index options of an ``instruments`` mapping (the file's section, or a
    calibration's own before it is written), typed."""
    obj = _obj(source, instruments, where)
    return (swaption_quote_records(obj.get("swaptions"), source, f"{where}.swaptions"),
            equity_option_quote_records(obj.get("equity_options"), source, f"{where}.equity_options"))
