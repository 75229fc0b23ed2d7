"""A sensitivity's shocks applied to the run's market data before calibration.

:func:`shocked_config` copies every market-data file of the run into the sensitivity's folder
(``sensitivities/<name>/inputs/``), changes the cells a shock touches (every other cell keeps
its exact text) and shocks the typed-in values of the configuration the same way, then returns
the configuration of the sensitivity set, reading its files from that folder. The shocked
inputs are thereby part of the run and of its manifest.

Shocks (units as the keys say; a shock that finds nothing to act on is an error naming it):

* ``curve_shift_bp``, ``curve_relative_shift``: every input rate of the curve, ``r -> r (1 + s(t))
  + shift``: par and zero rates as quoted, discount factors through their annually compounded
  zero rate; typed-in ``[curve]`` pillars likewise (in their own compounding);
* ``ufr_shift_bp``: ``curve_extrapolation.ultimate_forward_rate``;
* ``swaption_vol_shift_bp`` (normal volatility quotes), ``swaption_vol_relative`` (any quote);
* ``equity_vol_shift_points``: implied volatilities of every index and every typed-in index
  volatility, plus ``points / 100``;
* ``index_level_shift_pct``: every index level (file or typed in), times ``1 + pct / 100``;
* ``credit_spread_shift_bp``: every rating's spreads (file or typed in).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from pqflow.config.loader import parse_config
from pqflow.config.schema import RunConfig, SensitivitySection
from pqflow.errors import ConfigError, MarketDataError
from pqflow.models.parts import PART_KINDS, part_market_files
from pqflow.storage.csvtable import read_csv_table, write_csv_table

__all__ = ["INPUTS_DIR", "shocked_config", "relative_shift_function"]

INPUTS_DIR = "inputs"
BP = 1e-4
_CURVE_VALUES = ("par_rate", "zero_rate", "discount_factor")
_SWAPTION_VOLS = ("normal_vol_bp", "lognormal_vol", "shifted_lognormal_vol")


def relative_shift_function(path: Path) -> Callable[[np.ndarray], np.ndarray]:
    """``s(t)`` from a CSV ``maturity_years, relative_shift`` (decimals: ``0.2`` for +20%):
    linear between the rows, flat beyond the first and the last."""
    header, rows = read_csv_table(path)
    if header[:2] != ["maturity_years", "relative_shift"] or len(header) != 2:
        raise MarketDataError(f"{path}: the header must be 'maturity_years,relative_shift' (is {','.join(header)})")
    t: list[float] = []
    s: list[float] = []
    for k, row in enumerate(rows, start=1):
        where = f"{path}, data row {k}"
        if len(row) != 2:
            raise MarketDataError(f"{where}: {len(row)} cells, 2 expected")
        try:
            tk, sk = float(row[0]), float(row[1])
        except ValueError:
            raise MarketDataError(f"{where}: {row[0]!r} and {row[1]!r} must be numbers") from None
        if not (np.isfinite(tk) and np.isfinite(sk)) or tk < 0.0:
            raise MarketDataError(f"{where}: the maturity must be a number not below 0 and the shift finite")
        if t and tk <= t[-1]:
            raise MarketDataError(f"{where}: maturity {tk:g} is not greater than the previous row's {t[-1]:g}")
        if sk <= -1.0:
            raise MarketDataError(f"{where}: a relative shift of {sk:g} would make rates change sign or vanish")
        t.append(tk)
        s.append(sk)
    if not t:
        raise MarketDataError(f"{path}: no data rows")
    knots, values = np.array(t), np.array(s)
    return lambda x: np.interp(np.asarray(x, dtype=float), knots, values)


def _num(text: str) -> float:
    return float(text)


def _text(x: float) -> str:
    return repr(float(x))


class _Shocker:
    """Applies one sensitivity's shocks; remembers which shock found something to act on."""

    def __init__(self, sens: SensitivitySection, config: RunConfig) -> None:
        self.sens = sens
        self.hit: set[str] = set()
        self.relative = (
            relative_shift_function(config.base_dir / sens.curve_relative_shift)
            if sens.curve_relative_shift is not None else None
        )

    # -- curve ------------------------------------------------------------------------------

    @property
    def shifts_curve(self) -> bool:
        return self.sens.curve_shift_bp is not None or self.relative is not None

    def rate(self, t: np.ndarray, r: np.ndarray) -> np.ndarray:
        if self.relative is not None:
            r = r * (1.0 + self.relative(t))
            self.hit.add("curve_relative_shift")
        if self.sens.curve_shift_bp is not None:
            r = r + self.sens.curve_shift_bp * BP
            self.hit.add("curve_shift_bp")
        return r

    def curve_file(self, header: list[str], rows: list[list[str]], source: Path) -> list[list[str]]:
        if not self.shifts_curve:
            return rows
        col = next((c for c in _CURVE_VALUES if c in header), None)
        if col is None or "maturity_years" not in header:
            return rows  # the reader names what is wrong when the set is calibrated
        i_t, i_v = header.index("maturity_years"), header.index(col)
        out = []
        for k, row in enumerate(rows, start=1):
            row = list(row)
            if len(row) == len(header) and row[i_v] != "":
                try:
                    t, v = np.array([_num(row[i_t])]), _num(row[i_v])
                except ValueError:
                    raise MarketDataError(f"{source}, data row {k}: cannot shock a rate that is not a number") from None
                if col == "discount_factor":
                    z = self.rate(t, np.array([v ** (-1.0 / t[0]) - 1.0]))
                    row[i_v] = _text((1.0 + z[0]) ** (-t[0]))
                else:
                    row[i_v] = _text(self.rate(t, np.array([v]))[0])
            out.append(row)
        return out

    def typed_curve(self, curve: dict[str, Any]) -> None:
        if not self.shifts_curve:
            return
        t = np.array(curve["maturities"], dtype=float)
        v = np.array(curve["values"], dtype=float)
        if curve.get("kind", "zero_rates") == "discount_factors":
            z = self.rate(t, v ** (-1.0 / t) - 1.0)
            curve["values"] = ((1.0 + z) ** (-t)).tolist()
        else:
            curve["values"] = self.rate(t, v).tolist()

    # -- the other files -------------------------------------------------------------------

    def column(self, header: list[str], rows: list[list[str]], col: str, change: Callable[[float], float],
               key: str) -> list[list[str]]:
        if col not in header:
            return rows
        i = header.index(col)
        out = []
        for row in rows:
            row = list(row)
            if len(row) == len(header) and row[i] != "":
                try:
                    row[i] = _text(change(_num(row[i])))
                except ValueError:
                    pass  # not a number: the reader names the cell when the set is calibrated
                self.hit.add(key)
            out.append(row)
        return out

    def swaptions(self, header: list[str], rows: list[list[str]], source: Path) -> list[list[str]]:
        s = self.sens
        if s.swaption_vol_shift_bp is not None:
            if "normal_vol_bp" not in header:
                raise ConfigError(
                    f"sensitivity {s.name!r}: swaption_vol_shift_bp shifts normal volatility quotes, but {source} "
                    f"quotes {next((c for c in _SWAPTION_VOLS if c in header), 'no volatility')}; use "
                    f"swaption_vol_relative"
                )
            shift_bp = s.swaption_vol_shift_bp
            rows = self.column(header, rows, "normal_vol_bp", lambda v: v + shift_bp,
                               "swaption_vol_shift_bp")
        if s.swaption_vol_relative is not None:
            relative = s.swaption_vol_relative
            for col in _SWAPTION_VOLS:
                rows = self.column(header, rows, col, lambda v: v * (1.0 + relative),
                                   "swaption_vol_relative")
        return rows


def shocked_config(config: RunConfig, sens: SensitivitySection, set_dir: str | Path, *, source: str) -> RunConfig:
    """The configuration of sensitivity ``sens``: its market data copied (shocked) into
    ``set_dir/inputs/`` and its typed-in values shocked; ``[[sensitivities]]`` itself dropped."""
    set_dir = Path(set_dir)
    shock = _Shocker(sens, config)
    data = config.model_dump(mode="json", exclude_none=True)
    data.pop("sensitivities", None)
    md = data.get("market_data") or {}
    points = sens.equity_vol_shift_points
    level = sens.index_level_shift_pct
    spread = sens.credit_spread_shift_bp
    for kind in list(md):
        path = config.market_file(kind)
        if path is None:
            raise ConfigError(f"market_data.{kind}: no file given")
        if not path.is_file():
            raise MarketDataError(f"{path}: market-data file not found (market_data.{kind})")
        header, rows = read_csv_table(path)
        if kind == "curve":
            rows = shock.curve_file(header, rows, path)
        elif kind == "swaptions":
            rows = shock.swaptions(header, rows, path)
        elif kind == "equity_vols" and points is not None:
            rows = shock.column(header, rows, "implied_vol", lambda v: v + points / 100.0, "equity_vol_shift_points")
        elif kind == "equity_index" and level is not None:
            rows = shock.column(header, rows, "spot_level", lambda v: v * (1.0 + level / 100.0),
                                "index_level_shift_pct")
        elif kind == "credit_spreads" and spread is not None:
            rows = shock.column(header, rows, "spread_bp", lambda v: v + spread, "credit_spread_shift_bp")
        name = f"{kind}.csv"
        write_csv_table(set_dir / INPUTS_DIR / name, header, rows)
        md[kind] = f"{INPUTS_DIR}/{name}"
    for part_name, section in config.parts.items():  # a part plug-in's own files, copied unshocked
        for key, rel in part_market_files(PART_KINDS[part_name], section).items():
            path = config.base_dir / rel
            if not path.is_file():
                raise MarketDataError(f"{path}: market-data file not found (parts.{part_name}.{key})")
            header, rows = read_csv_table(path)
            name = f"{part_name}.{key}.csv"
            write_csv_table(set_dir / INPUTS_DIR / name, header, rows)
            data["parts"][part_name][key] = f"{INPUTS_DIR}/{name}"
    if sens.curve_relative_shift is not None:  # kept beside the shocked files, for the record
        header, rows = read_csv_table(config.base_dir / sens.curve_relative_shift)
        write_csv_table(set_dir / INPUTS_DIR / "curve_relative_shift.csv", header, rows)
    # typed-in values
    if "curve" in data:
        shock.typed_curve(data["curve"])
    if sens.ufr_shift_bp is not None and "curve_extrapolation" in data:
        data["curve_extrapolation"]["ultimate_forward_rate"] += sens.ufr_shift_bp * BP
        shock.hit.add("ufr_shift_bp")
    indices = [data["equity"], *data.get("indices", [])]
    for index in indices:
        if points is not None and "volatility" in index:
            index["volatility"] += points / 100.0
            shock.hit.add("equity_vol_shift_points")
        if level is not None and "level" in index:
            index["level"] *= 1.0 + level / 100.0
            shock.hit.add("index_level_shift_pct")
    if spread is not None:
        for rating in (data.get("credit") or {}).get("ratings", []):
            if "spreads_bp" in rating:
                rating["spreads_bp"] = [v + spread for v in rating["spreads_bp"]]
                shock.hit.add("credit_spread_shift_bp")
    missing = [k for k in _given(sens) if k not in shock.hit]
    if missing:
        raise ConfigError(
            f"sensitivity {sens.name!r}: {', '.join(missing)} finds nothing to shock in this run "
            "(no such market data and no typed-in value)"
        )
    return parse_config(data, source=source, base_dir=set_dir)


def _given(sens: SensitivitySection) -> list[str]:
    from pqflow.config.schema import SHOCK_KEYS

    return [k for k in SHOCK_KEYS if getattr(sens, k) is not None]
