"""Best estimate, certainty-equivalent value and TVOG of a portfolio, from a run's files.

``value_run`` projects every model point on every scenario of one set, part by part (memory
bounded by one part, reading only the columns the portfolio needs), and discounts each cash
flow with the set's ``deflator`` column:

* market-consistent set: ``D_t = 1 / B_t``, value ``E_Q[sum_t X_t / B_t]``;
* real-world set: ``D_t = q_density_t / B_t`` (a state-price deflator), value
  ``E_P[sum_t D_t X_t]``, which equals the market-consistent value (Girsanov's theorem): the two are
  estimates of one number from independent scenario sets, and their difference is reported in
  standard errors. For the reconciliation the real-world set is also discounted with the cash
  account alone (``E_P[sum_t X_t / B_t]``, density dropped): that is *not* a valuation, and
  the table shows how far it lies from the market-consistent value.

Standard errors are those of a mean over independent sampling units: when the set's metadata
says ``pqflow.antithetic = true`` the two paths of each antithetic pair are averaged first.
The certainty-equivalent (CE) value is the same projection on the deterministic forward
scenario (``pqflow.liabilities.scenarios``); ``TVOG = stochastic value - CE value``, with the
stochastic value's standard error (the CE value has none).

Values are reported for two quantities: ``best_estimate`` (every benefit) and ``guarantee``
(the guarantee's payoff alone: its cost), per model point, per product and in total, in the
portfolio's currency and for all the policies of each model point.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from pqflow.calibration.assemble import curve_from_calibration_file
from pqflow.errors import RunDirectoryError
from pqflow.liabilities.portfolio import LiabilityDataError, Portfolio, load_portfolio
from pqflow.liabilities.products import needed_bond_maturities, needed_columns, project_model_point
from pqflow.liabilities.scenarios import (
    BondInterpolation,
    annual_scenarios,
    certainty_equivalent_scenario,
    whole_year_indices,
)
from pqflow.market.curve import DiscountCurve
from pqflow.measure.blocks import column_drivers, smallest_block
from pqflow.storage.calibration_file import calibration_path, read_calibration_file
from pqflow.storage.manifest import MANIFEST, read_manifest
from pqflow.storage.names import (
    META_VALUATION_DATE,
    bond_maturity_of,
    density_block_column,
    density_column,
    equity_column,
)
from pqflow.storage.scenario_set import ScenarioSet
from pqflow.validation.control_variates import controlled_mean, summed
from pqflow.validation.moments import Moments, sampling_units

__all__ = [
    "QUANTITIES",
    "MEASURES",
    "RunInfo",
    "Group",
    "SetValuation",
    "inspect_run",
    "check_portfolio_against_run",
    "value_run",
    "PortfolioReads",
    "portfolio_reads",
]

QUANTITIES = ("best_estimate", "guarantee")
MEASURES = ("market_consistent", "real_world")


@dataclass(frozen=True, kw_only=True)
class RunInfo:
    """What a run directory offers the projection (read from its files)."""

    run_dir: str
    run_id: str | None
    valuation_date: str
    times: np.ndarray
    last_whole_year: int
    bond_columns: dict[float, str]
    equity_columns: tuple[str, ...]
    #: Level at time 0 of every calibrated total-return index, by column (core index first).
    index_levels: dict[str, float]
    #: The core index's name: the underlying when a portfolio names none and the run has one.
    core_index: str
    curve: DiscountCurve

    @property
    def bond_maturities(self) -> tuple[float, ...]:
        return tuple(sorted(self.bond_columns))

    def level_of(self, column: str | None) -> float:
        """Time-0 level of the index in ``column`` (``None``: the core index)."""
        if column is None:
            return next(iter(self.index_levels.values()))
        if column not in self.index_levels:
            raise LiabilityDataError(f"{self.run_dir}: no calibrated index writes column {column!r}")
        return self.index_levels[column]


def inspect_run(run_dir: str | Path) -> RunInfo:
    """Times, columns, curve and equity of a run (both sets must share grid and columns)."""
    run_dir = Path(run_dir)
    if not calibration_path(run_dir).is_file():
        raise RunDirectoryError(f"{run_dir}: no calibration.json; not a pqflow run directory")
    readers = {m: ScenarioSet(run_dir=run_dir, measure=m) for m in MEASURES}
    names = {m: r.column_names() for m, r in readers.items()}
    times = {m: next(r.iter_arrays([]))[0] for m, r in readers.items()}
    if not np.array_equal(times["market_consistent"], times["real_world"]):
        raise LiabilityDataError(f"{run_dir}: the two scenario sets have different output times")
    cols = names["market_consistent"]
    bonds = {mat: c for c in cols if (mat := bond_maturity_of(c)) is not None}
    equities = tuple(c for c in cols if c.startswith("equity_"))
    for m in ("real_world",):
        missing = set(bonds.values()) | set(equities) | {"deflator", "cash_account"}
        missing -= set(names[m])
        if missing:
            raise LiabilityDataError(f"{run_dir}: the {m} set lacks columns {sorted(missing)}")
    record = read_calibration_file(calibration_path(run_dir))
    core, indices = record.core_index, record.indices  # the core index first (an error names a missing one)
    run_id = read_manifest(run_dir).run_id if (run_dir / MANIFEST).exists() else None
    t = times["market_consistent"]
    return RunInfo(
        run_dir=str(run_dir),
        run_id=run_id,
        valuation_date=readers["market_consistent"].metadata().get(META_VALUATION_DATE, ""),
        times=t,
        last_whole_year=int(np.floor(t[-1] + 1e-9)),
        bond_columns={float(k): v for k, v in sorted(bonds.items())},
        equity_columns=equities,
        index_levels={i.column: i.level for i in indices},
        core_index=core.name,
        curve=curve_from_calibration_file(run_dir),
    )


def check_portfolio_against_run(portfolio: Portfolio, info: RunInfo) -> str | None:
    """Check every model point against the run; return the equity column to use (or None).

    Errors name the model point: a maturity or retirement beyond the scenario horizon, an
    equity index the files lack, bond maturities beyond what the files carry plus the allowed
    extrapolation.
    """
    src = portfolio.source
    interp = BondInterpolation(
        written=info.bond_maturities, max_extrapolation=portfolio.bond_extrapolation_years
    )
    needs_equity = False
    for mp in portfolio.model_points:
        event = "retirement" if mp.product == "deferred_annuity_gao" else "maturity"
        if mp.term > info.last_whole_year:
            raise LiabilityDataError(
                f"{src}: {mp.label}: {event} at year {mp.term} lies beyond the scenario horizon "
                f"of {info.last_whole_year} years in {info.run_dir}"
            )
        kinds = needed_columns(mp)
        needs_equity |= "equity" in kinds
        bonds = needed_bond_maturities(mp)
        if bonds:
            longest = max(bonds)
            if not info.bond_columns and longest > 0:
                raise LiabilityDataError(
                    f"{src}: {mp.label}: needs bond prices but the scenario files carry no zcb_ columns"
                )
            if longest > interp.longest + 1e-9:
                what = "the annuity factor at retirement" if event == "retirement" else "the bond fund"
                raise LiabilityDataError(
                    f"{src}: {mp.label}: {what} needs bond prices {longest:g} years to run, but the "
                    f"scenario files carry zcb_ columns to {info.bond_maturities[-1]:g} years and "
                    f"[valuation] bond_extrapolation_years = {portfolio.bond_extrapolation_years:g} "
                    f"allows {interp.longest:g} years (flat forward beyond the longest bond). "
                    "Write longer bonds (outputs.bond_maturities), shorten the annuity, or allow "
                    "more extrapolation."
                )
    if not needs_equity:
        return None
    name = portfolio.equity
    if name is None:
        if len(info.equity_columns) != 1:
            raise LiabilityDataError(
                f"{src}: [valuation] equity is not set and the run has "
                f"{len(info.equity_columns)} equity indices ({', '.join(info.equity_columns)}); name one"
            )
        return info.equity_columns[0]
    column = equity_column(name)
    if column not in info.equity_columns:
        raise LiabilityDataError(
            f"{src}: [valuation] equity = {name!r}, but the run carries "
            f"{', '.join(info.equity_columns) or 'no equity index'}"
        )
    return column


@dataclass(frozen=True, kw_only=True)
class Group:
    """A line of the results: one model point, one product, or the total."""

    level: str  # "model_point", "product" or "total"
    product: str  # the product type, or "all"
    name: str  # model point id, product type, or "total"
    members: tuple[int, ...]  # indices of the model points it sums
    policies: float


def _groups(portfolio: Portfolio) -> tuple[Group, ...]:
    mps = portfolio.model_points
    out = [
        Group(level="model_point", product=mp.product, name=mp.id, members=(i,), policies=mp.policies)
        for i, mp in enumerate(mps)
    ]
    for p in portfolio.products:
        members = tuple(i for i, mp in enumerate(mps) if mp.product == p)
        out.append(Group(level="product", product=p, name=p, members=members,
                         policies=sum(mps[i].policies for i in members)))
    out.append(Group(level="total", product="all", name="total", members=tuple(range(len(mps))),
                     policies=sum(mp.policies for mp in mps)))
    return tuple(out)


@dataclass(frozen=True, kw_only=True)
class SetValuation:
    """Values of a portfolio from one scenario set.

    groups: the result lines; arrays below are ``(n_groups, 2)`` with columns
    :data:`QUANTITIES`. ``undeflated_*`` are the cash-account-only values (density dropped),
    filled for the real-world set only. ``profile``: mean deflated cash flow by year for the
    product and total lines, ``(n_profile_groups, 2, J + 1)``; ``profile_ce`` the same on the
    certainty-equivalent scenario.
    """

    measure: str
    scenarios: int
    sampling_units: int
    antithetic: bool
    groups: tuple[Group, ...]
    value: np.ndarray
    std_error: np.ndarray
    certainty_equivalent: np.ndarray
    undeflated_value: np.ndarray | None
    undeflated_std_error: np.ndarray | None
    years: np.ndarray
    profile_groups: tuple[int, ...]
    profile: np.ndarray
    profile_ce: np.ndarray
    #: the plain sample means and their standard errors (``value`` / ``std_error`` use control variates)
    plain_value: np.ndarray | None = None
    plain_std_error: np.ndarray | None = None
    #: controls used per group (0: none: too few sampling units or nothing varies)
    controls: tuple[int, ...] = ()
    #: per model point, the density column its deflator carries (real world; ``None``: none)
    densities: tuple[str | None, ...] = ()

    @property
    def tvog(self) -> np.ndarray:
        """Stochastic value minus certainty-equivalent value, ``(n_groups, 2)``."""
        return self.value - self.certainty_equivalent


def _membership(groups: tuple[Group, ...], n_mp: int) -> np.ndarray:
    m = np.zeros((len(groups), n_mp))
    for g, group in enumerate(groups):
        m[g, list(group.members)] = 1.0
    return m


def _discounted(portfolio: Portfolio, scen, discount: np.ndarray) -> np.ndarray:
    """Deflated cash flows of every model point: ``(n_paths, n_mp, 2, J + 1)``; ``discount``
    is ``(n_paths, J + 1)`` for all model points or ``(n_paths, n_mp, J + 1)`` one each."""
    flows = [project_model_point(mp, scen) for mp in portfolio.model_points]
    arr = np.stack([np.stack(f, axis=1) for f in flows], axis=1)
    if discount.ndim == 2:
        return arr * discount[:, None, None, :]
    return arr * discount[:, :, None, :]


def _rates_drivers(run_dir: Path) -> tuple[str, ...]:
    cal = read_calibration_file(calibration_path(run_dir))
    return ("rates_x", "rates_y") if cal.rates_model == "g2pp" else ("rates",)


def model_point_densities(
    portfolio: Portfolio, reader: ScenarioSet, equity_col: str | None, rates: tuple[str, ...]
) -> tuple[str | None, ...]:
    """For each model point of a real-world set, the density its deflator carries: the smallest
    restricted block written that contains every driver the product reads (rates for the cash
    account and bonds, and the index it invests in), else the full ``q_density``. ``None`` for
    a market-consistent set (its deflator is ``1 / B_t``)."""
    if reader.measure != "real_world":
        return tuple(None for _ in portfolio.model_points)
    blocks = reader.density_blocks()
    out = []
    for mp in portfolio.model_points:
        needed = set(rates)
        if "equity" in needed_columns(mp) and equity_col is not None:
            needed |= column_drivers(equity_col, rates)
        block = smallest_block(frozenset(needed), blocks)
        out.append(density_column("real_world") if block is None else density_block_column("real_world", block))
    return tuple(out)



@dataclass(frozen=True, kw_only=True)
class PortfolioReads:
    """What projecting a portfolio reads from a set: ``columns`` (deflator, cash account when
    needed, the equity column, the bonds the interpolation puts weight on), ``bond_columns``
    (every written bond in maturity order: the interpolation's nodes), the ``interpolation``
    and the ``kinds`` of column the model points need."""

    columns: tuple[str, ...]
    bond_columns: tuple[str, ...]
    interpolation: BondInterpolation
    kinds: frozenset[str]


def portfolio_reads(portfolio: Portfolio, info: RunInfo, equity_col: str | None, *,
                    with_cash: bool = False) -> PortfolioReads:
    """The columns a projection of ``portfolio`` reads (``with_cash``: the cash account even
    when no product needs it, e.g. for the real-world reconciliation)."""
    interp = BondInterpolation(written=info.bond_maturities, max_extrapolation=portfolio.bond_extrapolation_years)
    kinds: set[str] = set()
    targets: list[float] = []
    for mp in portfolio.model_points:
        kinds |= needed_columns(mp)
        targets += needed_bond_maturities(mp)
    bond_cols: list[str] = []
    read_bonds: list[str] = []
    if targets:
        used = np.any(interp.weights(sorted(set(targets))) != 0.0, axis=0)
        if np.any(used):
            bond_cols = [info.bond_columns[m] for m in info.bond_maturities]
            read_bonds = [c for c, u in zip(bond_cols, used, strict=True) if u]
    columns = ["deflator"]
    if "cash_account" in kinds or with_cash:
        columns.append("cash_account")
    if equity_col is not None:
        columns.append(equity_col)
    columns += read_bonds
    return PortfolioReads(columns=tuple(columns), bond_columns=tuple(bond_cols), interpolation=interp,
                          kinds=frozenset(kinds))

def value_run(run_dir: str | Path, portfolio: Portfolio | str | Path, measure: str) -> SetValuation:
    """Value ``portfolio`` on the ``measure`` set of the run in ``run_dir``."""
    if measure not in MEASURES:
        raise ValueError(f"unknown measure {measure!r}: use one of {MEASURES}")
    if not isinstance(portfolio, Portfolio):
        portfolio = load_portfolio(portfolio)
    info = inspect_run(run_dir)
    equity_col = check_portfolio_against_run(portfolio, info)
    last = portfolio.max_term
    reads = portfolio_reads(portfolio, info, equity_col, with_cash=measure == "real_world")
    interp, bond_cols = reads.interpolation, reads.bond_columns
    real_world = measure == "real_world"
    reader = ScenarioSet(run_dir=Path(run_dir), measure=measure)
    densities = model_point_densities(portfolio, reader, equity_col, _rates_drivers(Path(run_dir)))
    density_cols = sorted({d for d in densities if d is not None})
    columns = [*reads.columns, *density_cols]

    # Certainty-equivalent cash flows: the TVOG's other leg, and the timing weights of the
    # control variates (deflated CE cash flows have a known expectation: the CE value).
    ce_scen = certainty_equivalent_scenario(
        info.curve, last_year=last, interpolation=interp, equity_level=info.level_of(equity_col)
    )
    p0 = ce_scen.deflator[0]  # P(0, j)
    ce_raw = np.stack([np.stack(f, axis=1) for f in (project_model_point(mp, ce_scen)
                                                     for mp in portfolio.model_points)],
                      axis=1)[0]  # (n_mp, 2, J + 1), undiscounted
    timing = np.abs(ce_raw[:, 0, :]) * p0[None, :]  # a_mp(j) P(0, j): CE present value by year
    reads_equity = np.array(["equity" in needed_columns(mp) and equity_col is not None
                             for mp in portfolio.model_points])

    groups = _groups(portfolio)
    member = _membership(groups, len(portfolio.model_points))
    profile_idx = tuple(i for i, g in enumerate(groups) if g.level != "model_point")
    antithetic = reader.antithetic
    acc: dict[str, Moments | None] = {"value": None, "undeflated": None, "profile": None}
    units_value: list[np.ndarray] = []
    units_controls: list[np.ndarray] = []
    n_paths = 0
    for times, cols in reader.iter_arrays(columns):
        scen = annual_scenarios(
            times, cols, last_year=last, equity_column=equity_col,
            bond_columns=bond_cols, interpolation=interp,
        )
        n_paths += scen.n_paths
        stats = {}
        idx = whole_year_indices(times, last)
        if real_world and density_cols:
            cash = cols["cash_account"][:, idx]
            weight = np.stack([cols[d][:, idx] if d is not None else scen.deflator * cash for d in densities], axis=1)
            deflator = weight / cash[:, None, :]  # (n, n_mp, J+1): each model point's own deflator
        else:
            deflator = np.broadcast_to(scen.deflator[:, None, :], (scen.n_paths, len(densities), idx.size))
            weight = None
        flows = _discounted(portfolio, scen, deflator)  # (n, n_mp, 2, J+1)
        by_group = np.einsum("gm,nmqt->ngqt", member, flows)
        # controls per model point, summed over each group's members: deflated CE cash flows,
        # the same scaled by the index's performance, and (real world) the density itself
        ctrl = [np.einsum("nmj,mj->nm", deflator, timing / p0[None, :])]
        if np.any(reads_equity):
            if scen.equity is None:
                raise RuntimeError("a model point reads the equity index, but it was not read")
            growth = scen.equity / info.level_of(equity_col) * p0[None, :]  # S_j P(0, j) / S_0
            ctrl.append(np.einsum("nmj,mj->nm", deflator * growth[:, None, :], timing / p0[None, :]) * reads_equity)
        if weight is not None:
            ctrl.append(np.einsum("nmj,mj->nm", weight, timing))
        units_value.append(sampling_units(flows.sum(axis=-1).reshape(scen.n_paths, -1), antithetic))
        units_controls.append(sampling_units(np.stack(ctrl, axis=-1).reshape(scen.n_paths, -1), antithetic))
        stats["value"] = by_group.sum(axis=-1).reshape(scen.n_paths, -1)
        stats["profile"] = by_group[:, profile_idx].reshape(scen.n_paths, -1)
        if real_world:
            if scen.cash_account is None:
                raise RuntimeError("the real-world valuation reads the cash account, but it was not read")
            undeflated = _discounted(portfolio, scen, 1.0 / scen.cash_account)
            stats["undeflated"] = np.einsum("gm,nmq->ngq", member, undeflated.sum(axis=-1)).reshape(
                scen.n_paths, -1)
        for key, values in stats.items():
            m = Moments.of(sampling_units(values, antithetic))
            prev = acc[key]
            acc[key] = m if prev is None else prev.merge(m)
    if acc["value"] is None or acc["profile"] is None:
        raise RunDirectoryError(f"{run_dir}: the {measure} set has no scenarios")

    ce_flows = np.einsum("gm,nmqt->ngqt", member, _discounted(portfolio, ce_scen, ce_scen.deflator))[0]
    shape = (len(groups), len(QUANTITIES))
    und = acc["undeflated"]
    # Control variates per model point (cross-fitted regression, validation.control_variates);
    # a line's value is the sum of its model points' and its standard error that of the summed
    # residuals, so product and total lines stay exact sums of their model points.
    n_mp = len(portfolio.model_points)
    y_all = np.concatenate(units_value).reshape(-1, n_mp, len(QUANTITIES))
    c_all = np.concatenate(units_controls).reshape(y_all.shape[0], n_mp, -1)
    ce_value = timing.sum(axis=1)  # each control's expectation: the model point's CE value
    residuals = np.empty_like(y_all)
    used = []
    for i in range(n_mp):
        k = c_all.shape[2]
        known = np.full(k, ce_value[i])
        if np.any(reads_equity) and not reads_equity[i]:
            known[1] = 0.0  # its index control is identically 0 (dropped as not varying)
        est = controlled_mean(y_all[:, i, :], c_all[:, i, :], known)
        residuals[:, i, :] = est.residuals
        used.append(est.n_controls)
    value, se = summed(residuals, member)
    controls = [max((used[i] for i in g.members), default=0) for g in groups]
    return SetValuation(
        measure=measure,
        scenarios=n_paths,
        sampling_units=acc["value"].count,
        antithetic=antithetic,
        groups=groups,
        value=value,
        std_error=se,
        plain_value=acc["value"].mean.reshape(shape),
        plain_std_error=acc["value"].std_error.reshape(shape),
        controls=tuple(controls),
        densities=densities,
        certainty_equivalent=ce_flows.sum(axis=-1),
        undeflated_value=und.mean.reshape(shape) if und is not None else None,
        undeflated_std_error=und.std_error.reshape(shape) if und is not None else None,
        years=np.arange(last + 1, dtype=float),
        profile_groups=profile_idx,
        profile=acc["profile"].mean.reshape(len(profile_idx), len(QUANTITIES), last + 1),
        profile_ce=ce_flows[list(profile_idx)],
    )

