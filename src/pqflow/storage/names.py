"""The names of the scenario files: every column, and every key of a part's Parquet metadata.

This module is the one place a column name or a metadata key is spelled. It imports nothing
but the standard library, so every layer may import it (``models/`` names its columns with
it without pulling in pyarrow); the other modules of ``storage/`` read and write the bytes.

Columns of a scenario part (one row per scenario and output time)::

    scenario, time                       the key columns
    short_rate, cash_account             the rates
    zcb_<m>y                             nominal zero-coupon bond with <m> years to run
    equity_<name>, property_<name>       total-return indices
    cpi, real_short_rate, real_zcb_<m>y  inflation (Jarrow-Yildirim)
    intensity_<r>, cumulative_intensity_<r>, dzcb_<r>_<m>y, spread_<r>_<m>y   credit by rating
    variance_<name>                      a Heston index's instantaneous variance
    deflator                             state-price deflator
    q_density / p_density                the density (real-world set / market-consistent set)
    q_density_<block> / p_density_<block>  a density restricted to a block of drivers
"""

from __future__ import annotations

import re

__all__ = [
    "MEASURES",
    "KEY_COLUMNS",
    "SHORT_RATE",
    "CASH_ACCOUNT",
    "DEFLATOR",
    "CPI",
    "REAL_SHORT_RATE",
    "INDEX_KINDS",
    "CREDIT_PREFIX",
    "DENSITY_COLUMN",
    "DENSITY_UNIT",
    "VARIANCE_UNIT",
    "bond_column",
    "real_bond_column",
    "index_column",
    "equity_column",
    "variance_column",
    "intensity_column",
    "cumulative_intensity_column",
    "dzcb_column",
    "spread_column",
    "spread_prefix",
    "density_column",
    "BOND_PREFIX",
    "REAL_BOND_PREFIX",
    "DZCB_PREFIX",
    "INDEX_PREFIXES",
    "dzcb_rating",
    "bond_maturity_of",
    "index_columns",
    "density_block_or_none",
    "density_block_column",
    "density_columns",
    "density_block",
    "deflator_unit",
    "META_VERSION",
    "META_MEASURE",
    "META_MEASURE_DESCRIPTION",
    "META_VALUATION_DATE",
    "META_TIME_UNIT",
    "META_COMPOUNDING",
    "META_UNITS",
    "META_DENSITY_COLUMN",
    "META_ANTITHETIC",
    "META_BATCH",
    "META_FIRST_SCENARIO",
    "META_CALIBRATION_SHA256",
    "META_DENSITY_BLOCKS",
    "META_INSURER",
    "META_CURRENCY",
    "META_RUN_ID",
    "META_CAUTION",
]

MEASURES = ("real_world", "market_consistent")
KEY_COLUMNS = ("scenario", "time")

SHORT_RATE = "short_rate"
CASH_ACCOUNT = "cash_account"
DEFLATOR = "deflator"
CPI = "cpi"
REAL_SHORT_RATE = "real_short_rate"
INDEX_KINDS = ("equity", "property")
#: Block names (and drivers) of the credit part start with this.
CREDIT_PREFIX = "credit_"

#: The full density of each set: dQ/dP in the real-world set, dP/dQ in the market-consistent one.
DENSITY_COLUMN = {"real_world": "q_density", "market_consistent": "p_density"}

DENSITY_UNIT = "density on the grid up to time (dimensionless, mean 1)"
VARIANCE_UNIT = "instantaneous variance of the index's log-return per year (Heston v, truncated at 0)"

# --------------------------------------------------------------------------- Parquet metadata keys

META_VERSION = "pqflow.version"
META_MEASURE = "pqflow.measure"
META_MEASURE_DESCRIPTION = "pqflow.measure_description"
META_VALUATION_DATE = "pqflow.valuation_date"
META_TIME_UNIT = "pqflow.time_unit"
META_COMPOUNDING = "pqflow.compounding"
#: JSON object: column -> unit text.
META_UNITS = "pqflow.units"
META_DENSITY_COLUMN = "pqflow.density_column"
#: "true" or "false".
META_ANTITHETIC = "pqflow.antithetic"
META_BATCH = "pqflow.batch"
META_FIRST_SCENARIO = "pqflow.first_scenario"
META_CALIBRATION_SHA256 = "pqflow.calibration_sha256"
#: JSON object: block name -> list of drivers.
META_DENSITY_BLOCKS = "pqflow.density_blocks"
# the valuation tables (valuation/*.parquet) also carry these
META_INSURER = "pqflow.insurer"
META_CURRENCY = "pqflow.currency"
META_RUN_ID = "pqflow.run_id"
META_CAUTION = "pqflow.caution"


# --------------------------------------------------------------------------- column names


BOND_PREFIX = "zcb_"
REAL_BOND_PREFIX = "real_zcb_"
DZCB_PREFIX = "dzcb_"
INDEX_PREFIXES = tuple(f"{kind}_" for kind in INDEX_KINDS)


_BOND = re.compile(r"^zcb_(?P<m>[0-9.eE+-]+)y$")


def bond_maturity_of(column: str) -> float | None:
    """``zcb_10y`` -> 10.0; ``None`` for a column that is not a bond."""
    match = _BOND.match(column)
    return float(match.group("m")) if match else None


def index_columns(names: list[str] | tuple[str, ...]) -> list[str]:
    """The total-return index columns (``equity_*``, ``property_*``) among ``names``, in order."""
    return [c for c in names if c.startswith(INDEX_PREFIXES)]


def dzcb_rating(column: str) -> str:
    """The rating of a ``dzcb_{rating}_{m}y`` column."""
    if not column.startswith(DZCB_PREFIX):
        raise ValueError(f"{column!r} is not a defaultable bond column")
    return column[len(DZCB_PREFIX):].rsplit("_", 1)[0]


def bond_column(maturity: float) -> str:
    """Column name of the zero-coupon bond with ``maturity`` years to run: ``zcb_10y``."""
    return f"zcb_{maturity:g}y"


def real_bond_column(maturity: float) -> str:
    """Column name of the real zero-coupon bond with ``maturity`` years to run: ``real_zcb_10y``."""
    return f"real_zcb_{maturity:g}y"


def index_column(kind: str, name: str) -> str:
    """Column of a total-return index: ``equity_{name}`` or ``property_{name}``."""
    if kind not in INDEX_KINDS:
        raise ValueError(f"index kind must be one of {INDEX_KINDS}, not {kind!r}")
    return f"{kind}_{name}"


def equity_column(name: str) -> str:
    """Column name of an equity total-return index: ``equity_{name}``."""
    return index_column("equity", name)


def variance_column(name: str) -> str:
    """Column of an index's instantaneous variance ``v_t`` (the truncated ``v^+``)."""
    return f"variance_{name}"


def intensity_column(rating: str) -> str:
    """``intensity_{rating}``: ``lambda_t`` per year."""
    return f"intensity_{rating}"


def cumulative_intensity_column(rating: str) -> str:
    """``cumulative_intensity_{rating}``: ``int_0^t lambda ds``."""
    return f"cumulative_intensity_{rating}"


def dzcb_column(rating: str, maturity: float) -> str:
    """``dzcb_{rating}_{m}y``: pre-default price of the defaultable zero-coupon bond."""
    return f"dzcb_{rating}_{maturity:g}y"


def spread_column(rating: str, maturity: float) -> str:
    """``spread_{rating}_{m}y``: its zero-coupon spread."""
    return f"spread_{rating}_{maturity:g}y"


def spread_prefix(rating: str) -> str:
    """What every ``spread_{rating}_{m}y`` column of one rating starts with."""
    return f"spread_{rating}_"


def density_column(measure: str) -> str:
    """The full density of a set: ``q_density`` (real-world) or ``p_density`` (market-consistent)."""
    try:
        return DENSITY_COLUMN[measure]
    except KeyError:
        raise ValueError(f"unknown measure {measure!r}: use one of {MEASURES}") from None


def density_block_column(measure: str, block: str) -> str:
    """``q_density_<block>`` in the real-world set, ``p_density_<block>`` in the other."""
    return f"{density_column(measure)}_{block}"


def density_columns(measure: str, names: list[str]) -> list[str]:
    """The density columns among ``names``, full density first: ``^q_density(_.+)?$`` in the
    real-world set, ``^p_density(_.+)?$`` in the market-consistent set."""
    base = density_column(measure)
    pattern = re.compile(rf"^{base}(_.+)?$")
    found = [c for c in names if pattern.match(c)]
    return sorted(found, key=lambda c: (c != base, c))


def density_block(column: str) -> str | None:
    """The block of a density column (the suffix after ``q_density_`` / ``p_density_``), or
    ``None`` for the full density."""
    for base in DENSITY_COLUMN.values():
        if column == base:
            return None
        if column.startswith(base + "_"):
            return column[len(base) + 1:]
    raise ValueError(f"{column!r} is not a density column")


def density_block_or_none(column: str) -> str | None:
    """The block of a restricted density column, ``None`` for any other column (the full
    density included)."""
    try:
        return density_block(column)
    except ValueError:
        return None


def deflator_unit(measure: str) -> str:
    """Unit text of the ``deflator`` column in a set of ``measure``."""
    if measure == "real_world":
        return f"state-price deflator {DENSITY_COLUMN[measure]} / {CASH_ACCOUNT}"
    return f"1 / {CASH_ACCOUNT}"
