"""Further assets for the martingale ("1 = 1") test: inflation-linked and defaultable claims.

:func:`pqflow.validation.martingale.martingale_table` tests the deflator, the nominal zero bonds
and every total-return index itself; the assets here are the claims of the other model parts,
built from a run's ``calibration.json`` and the columns its files carry. Each is a
:class:`MartingaleAsset`: the columns it needs, its value at ``t`` in currency from those columns
(not yet deflated) and the reference ``E[D_t A_t]``, today's price of the claim, from the
calibration record (never from the simulation):

* **consumer price index** ``cpi`` (Jarrow-Yildirim): ``I_t`` is the currency value of the
  claim paying ``I_t`` at ``t``, so ``E_Q[I_t / B_t] = I_0 P_r(0, t)`` with the real curve
  ``P_r`` (Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006,
  ch. 15.1);
* each **real zero bond** ``real_zcb_{m}y`` (CPI units): its currency price is
  ``I_t P_r(t, t+m)``, and ``E_Q[I_t P_r(t, t+m) / B_t] = I_0 P_r(0, t+m)`` (same source);
* each **defaultable zero bond** ``dzcb_{r}_{m}y`` (pre-default price ``Dbar(t, t+m)``) under
  recovery of market value: the pre-default price discounted at ``r + L lambda`` is a
  Q-martingale (Duffie and Singleton, "Modeling term structures of defaultable bonds", *Review
  of Financial Studies* 12 (1999)), so with ``Lambda_t = int_0^t lambda`` (the column
  ``cumulative_intensity_{r}``) and ``L = 1 - R``

      E_Q[exp(-L Lambda_t) Dbar(t, t+m) / B_t] = P(0, t+m) exp(-L H(t+m)),

  ``H`` the rating's integrated market hazard curve, which the CIR++ shift reprices exactly
  (:mod:`pqflow.models.cir_credit`); and the same with ``m = 0`` (asset
  ``cumulative_intensity_{r}``: ``E_Q[exp(-L Lambda_t) / B_t] = P(0, t) exp(-L H(t))``, the
  defaultable bond maturing at ``t``). Rates and intensities are independent in this model. The
  simulated ``Lambda_t`` comes from a full-truncation Euler scheme whose bias is stated in
  :mod:`pqflow.models.cir_credit` (below 0.5 bp of the 10-year spread with monthly substeps for
  investment-grade parameters), far below the Monte Carlo error of a few thousand paths.

The real-world set uses the same references: its deflator ``q_density / B_t`` carries the
density of every part, so ``E_P[D_t A_t] = E_Q[A_t / B_t]``.

A part that is not configured writes none of its columns and yields no asset. Files that carry
a part's columns while ``calibration.json`` lacks the part's parameters (or the columns a
claim needs) are inconsistent: :class:`pqflow.errors.IntegrityError`, never a silently
skipped test.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from pqflow.calibration.inflation_kind import real_bond_maturity_of
from pqflow.calibration.parts import credit_from_record
from pqflow.errors import ConfigError, IntegrityError
from pqflow.models.cir_credit import CreditRating
from pqflow.models.parts import PART_KINDS, entry_kind, recorded_parts
from pqflow.storage.calibration_file import (
    PLUGIN_PARTS_KEY,
    calibration_path,
    calibration_record,
    plugin_part_fields,
)
from pqflow.storage.names import CPI as CPI_COLUMN
from pqflow.storage.names import cumulative_intensity_column
from pqflow.validation.run_files import RunInputs

__all__ = [
    "MartingaleAsset",
    "martingale_assets",
    "plugin_assets",
    "inflation_assets",
    "credit_assets",
    "real_bond_maturity_of",
    "defaultable_bond_of",
]

_DEFAULTABLE_BOND = re.compile(r"^dzcb_(?P<r>.+)_(?P<m>[0-9.eE+-]+)y$")
_CUMULATIVE = re.compile(r"^cumulative_intensity_(?P<r>.+)$")


@dataclass(frozen=True, kw_only=True)
class MartingaleAsset:
    """One asset of the martingale test beyond the built-in ones.

    name: the ``asset`` label of its rows (unique in the table); description: what it is;
    columns: the file columns ``value`` reads; value: ``{column: (n_paths, n_times)} ->
    (n_paths, n_times)``, the asset's currency value at each output time (not deflated);
    reference: ``times (n_times,) -> (n_times,)``, the expected deflated value ``E[D_t A_t]``
    (today's price of the claim on ``A_t``).
    """

    name: str
    description: str
    columns: tuple[str, ...]
    value: Callable[[dict[str, np.ndarray]], np.ndarray]
    reference: Callable[[np.ndarray], np.ndarray]


def defaultable_bond_of(column: str) -> tuple[str, float] | None:
    """``dzcb_BBB_5y`` -> ``("BBB", 5.0)``; ``None`` for any other column."""
    match = _DEFAULTABLE_BOND.match(column)
    return (match.group("r"), float(match.group("m"))) if match else None


def inflation_assets(inputs: RunInputs, columns: Sequence[str]) -> list[MartingaleAsset]:
    """The CPI and each real zero bond in ``columns`` (none without a ``cpi`` column), from the
    inflation kind (:meth:`pqflow.calibration.inflation_kind.InflationKind.martingale_assets`)
    through the generic path of the kinds with an entry of their own."""
    record = calibration_record(inputs.calibration, calibration_path(inputs.run_dir))
    if CPI_COLUMN in columns and record.inflation is None:
        raise IntegrityError(
            f"{inputs.run_dir}: the files carry {CPI_COLUMN!r} but calibration.json has no usable "
            "parameters.inflation (real_curve, cpi_base)"
        )
    if record.inflation is None:
        real_bonds = sorted((m, c) for c in columns if (m := real_bond_maturity_of(c)) is not None)
        if real_bonds:
            raise IntegrityError(
                f"the files carry real bonds ({', '.join(c for _, c in real_bonds)}) but no {CPI_COLUMN!r} "
                "column: their currency prices cannot be formed"
            )
        return []
    return _own_entry_assets(inputs, columns)  # the kind refuses real bonds without the CPI column too


def _own_entry_assets(inputs: RunInputs, columns: Sequence[str]) -> list[MartingaleAsset]:
    """The assets of the registered kinds whose entry has a place of its own in
    ``calibration.json`` (:func:`pqflow.models.parts.recorded_parts`; today inflation)."""
    record = calibration_record(inputs.calibration, calibration_path(inputs.run_dir))
    out = []
    for name, kind, entry in recorded_parts(record.parameters, {}):
        try:
            part = entry_kind(kind).from_json(entry)
        except (KeyError, TypeError, ValueError) as exc:
            raise IntegrityError(f"{inputs.run_dir}: calibration.json has no usable parameters.{name}: {exc!r}") \
                from None
        out += [MartingaleAsset(name=a.name, description=a.description, columns=a.columns, value=a.value,
                                reference=a.reference) for a in kind.martingale_assets(part, inputs.curve, columns)]
    return out


def _ratings(inputs: RunInputs) -> dict[str, CreditRating]:
    try:
        par = calibration_record(inputs.calibration, calibration_path(inputs.run_dir)).credit
        if par is None:
            raise ConfigError("no credit part")
        model, _ = credit_from_record(par)
    except (ConfigError, TypeError, ValueError) as exc:
        raise IntegrityError(
            f"{inputs.run_dir}: the files carry credit columns but calibration.json has no usable "
            f"parameters.credit: {exc!r}"
        ) from None
    return {r.name: r for r in model.ratings}


def credit_assets(inputs: RunInputs, columns: Sequence[str]) -> list[MartingaleAsset]:
    """Per rating with a ``cumulative_intensity_{r}`` column: the defaultable bond maturing at
    ``t``, and each defaultable zero bond ``dzcb_{r}_{m}y`` in ``columns``."""
    bonds = []
    for c in columns:
        bond = defaultable_bond_of(c)
        if bond is not None:
            bonds.append((*bond, c))
    cumulative = [hit.group("r") for c in columns if (hit := _CUMULATIVE.match(c))]
    if not bonds and not cumulative:
        return []
    ratings = _ratings(inputs)
    unknown = sorted({r for r, _, _ in bonds} - set(ratings)) + sorted(set(cumulative) - set(ratings))
    if unknown:
        raise IntegrityError(
            f"{inputs.run_dir}: the files carry credit columns of rating(s) {', '.join(dict.fromkeys(unknown))} "
            f"that calibration.json does not record (it has: {', '.join(ratings) or 'none'})"
        )
    missing = sorted({cumulative_intensity_column(r) for r, _, _ in bonds} - set(columns))
    if missing:
        raise IntegrityError(
            f"the files carry defaultable bonds but not {', '.join(missing)}: the default losses "
            "exp(-L Lambda_t) that make their martingale cannot be formed"
        )
    curve = inputs.curve
    out: list[MartingaleAsset] = []
    for name in cumulative:
        rating = ratings[name]
        lam = cumulative_intensity_column(name)

        def losses(cols: dict[str, np.ndarray], lam: str = lam, loss: float = rating.loss) -> np.ndarray:
            return np.exp(-loss * cols[lam])

        def at_t(t: np.ndarray, rating: CreditRating = rating) -> np.ndarray:
            t = np.asarray(t, dtype=float)
            return np.asarray(curve.discount(t)) * np.exp(-rating.loss * rating.hazard.integrated(t))

        out.append(MartingaleAsset(
            name=lam,
            description=(f"defaultable zero bond {name} maturing at t: exp(-L Lambda_t), L = {rating.loss:g} "
                         "(recovery of market value)"),
            columns=(lam,),
            value=losses,
            reference=at_t,
        ))
        for r, m, col in bonds:
            if r != name:
                continue

            def value(cols: dict[str, np.ndarray], lam: str = lam, col: str = col,
                      loss: float = rating.loss) -> np.ndarray:
                return np.exp(-loss * cols[lam]) * cols[col]

            def reference(t: np.ndarray, m: float = m, rating: CreditRating = rating) -> np.ndarray:
                t = np.asarray(t, dtype=float) + m
                return np.asarray(curve.discount(t)) * np.exp(-rating.loss * rating.hazard.integrated(t))

            out.append(MartingaleAsset(
                name=col,
                description=(f"defaultable zero bond {name}, {m:g} years to run, with default losses "
                             f"exp(-L Lambda_t) (recovery of market value)"),
                columns=(lam, col),
                value=value,
                reference=reference,
            ))
    return out


def plugin_assets(inputs: RunInputs, columns: Sequence[str]) -> list[MartingaleAsset]:
    """The traded claims of the registered part plug-ins recorded in ``calibration.json``
    (:meth:`pqflow.models.parts.PartKind.martingale_assets`; a kind may declare none)."""
    source = calibration_path(inputs.run_dir)
    out = []
    for name, entry in calibration_record(inputs.calibration, source).plugin_parts.items():
        kind = PART_KINDS.get(name)
        if kind is None:
            raise IntegrityError(f"{source}: parameters.{PLUGIN_PARTS_KEY}.{name}: no part kind {name!r} is "
                                 "registered, so its martingale assets cannot be formed")
        form, _ = plugin_part_fields(entry, source, name)
        for a in kind.martingale_assets(entry_kind(kind).from_json(form), inputs.curve, columns):
            out.append(MartingaleAsset(name=a.name, description=a.description, columns=a.columns, value=a.value,
                                       reference=a.reference))
    return out


def martingale_assets(inputs: RunInputs, columns: Sequence[str]) -> list[MartingaleAsset]:
    """Every further asset the files' ``columns`` allow: inflation, credit, then the part
    plug-ins'."""
    columns = list(columns)
    return [*inflation_assets(inputs, columns), *credit_assets(inputs, columns), *plugin_assets(inputs, columns)]
