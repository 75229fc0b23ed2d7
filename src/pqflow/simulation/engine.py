"""The batch engine: exact transitions on the output grid, under either measure.

For each step the model gives the exact law ``s_1 = F s_0 + c + e`` (``pqflow.models.base``),
``e = L z`` with ``z`` standard normal, plus the real-world mean shift ``m`` in the real-world set.
Because the recursion is linear, every path splits into a deterministic part and a noise part,

    s_k = mu_k + y_k,    mu_{k+1} = F_k mu_k + c_k (+ m_k),  mu_0 = s_0,
                         y_{k+1}  = F_k y_k + L_k z_k,       y_0 = 0,

so the deterministic part is computed once per grid and the engine only runs the noise
recursion, vectorised over paths (time-major buffers, one small matrix product per step). The
same ``z`` give the density weights (``pqflow.measure.density``): ``log w_k = -/+ sum_j eta_j.z_j
- sum_j |eta_j|^2 / 2``. The deflator is the density over the cash account (real world) or one
over the cash account (market consistent).

Antithetic pairs are paths ``(2j, 2j+1)`` driven by ``z`` and ``-z``. The noise part is linear in
``z`` and IEEE arithmetic rounds symmetrically, so the partner's noise is exactly ``-y``: the
engine runs the recursion for one path of each pair only. Outputs are the same bits as running
both.

The step laws of a grid depend only on the model and the grid, not on the batch, so they are
computed once per process and reused (a small cache keyed on the model's pickled state and the
grid's bytes); results never depend on whether the cache was warm.

Random numbers: batch ``b`` of measure ``m`` draws ``z`` of shape ``(n_steps, d, n)`` in C order
(``n = n_paths``, or ``n_paths / 2`` with antithetic sampling) from its own stream
(``pqflow.simulation.streams``).

Parts that are not Gaussian (credit intensities, a Heston index) are simulated on substeps,
conditionally on the economy's columns. Their schemes say what one substep does
(:class:`SubstepScheme`); :func:`run_substeps` owns the loop over output steps and substeps and
every draw: per output step ``(substeps, rows, n)`` standard normals from the part's own
stream (mirrored in pairs with antithetic sampling), the same numbers as one C-order draw of
shape ``(n_steps * substeps, rows, n)``.
"""

from __future__ import annotations

import hashlib
import pickle
import threading
from collections import OrderedDict
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

from pqflow.measure.blocks import ObservedRows, gaussian_block_coefficients, observed_block_coefficients
from pqflow.measure.density import accumulate_exponent, deflator, density_coefficients, signed_coefficients
from pqflow.models.base import ScenarioModel
from pqflow.storage.names import CASH_ACCOUNT, DEFLATOR, MEASURES, density_block_column, density_column

__all__ = [
    "MEASURES",
    "GridLaws",
    "SimulatedStates",
    "Workspace",
    "time_grid",
    "grid_laws",
    "BlockLaws",
    "block_laws",
    "simulate_states",
    "simulate_batch",
    "SubstepScheme",
    "run_substeps",
]



def time_grid(horizon_years: float, steps_per_year: int) -> np.ndarray:
    """Output times ``k / steps_per_year``, ``k = 0 .. horizon * steps_per_year``."""
    n = int(round(horizon_years * steps_per_year))
    return np.arange(n + 1, dtype=float) / steps_per_year


@dataclass(frozen=True, kw_only=True)
class GridLaws:
    """The exact step laws of a model on one grid, stacked (``K`` steps, ``d`` factors).

    transition: ``F_k``, ``(K, d, d)``; chol: ``L_k``, ``(K, d, d)``;
    eta: density coefficients ``L_k^{-1} m_k``, ``(K, d)``;
    half_sq_cum: ``sum_{j<k} |eta_j|^2 / 2``, ``(K + 1,)``;
    mean: deterministic part ``mu_k`` per measure, ``{measure: (K + 1, d)}``.
    """

    transition: np.ndarray
    chol: np.ndarray
    eta: np.ndarray
    half_sq_cum: np.ndarray
    mean: dict[str, np.ndarray]


@dataclass(frozen=True, kw_only=True)
class SimulatedStates:
    """States and density weights of one batch (the simulation core, before output columns).

    states: ``(d, n_paths, n_times)``, each factor C-contiguous; ``path_states`` is the
    ``(n_paths, n_times, d)`` view the models take. density: ``(n_paths, n_times)``.
    """

    states: np.ndarray
    density: np.ndarray
    #: densities restricted to blocks of states, ``(n_blocks, n_paths, n_times)`` (``None``: none asked)
    block_density: np.ndarray | None = None

    @property
    def path_states(self) -> np.ndarray:
        return self.states.transpose(1, 2, 0)


class Workspace:
    """Buffers reused from one batch to the next by one worker (one thread at a time).

    Passing a workspace saves allocating (and the operating system zeroing) fresh memory for
    every batch. The arrays a call returns then live in the workspace: they are valid until the
    next call that uses the same workspace.
    """

    def __init__(self) -> None:
        self._arrays: dict[str, np.ndarray] = {}

    def array(self, name: str, shape: tuple[int, ...]) -> np.ndarray:
        """An uninitialised float64 array ``name`` of ``shape`` (reused when the shape matches)."""
        buf = self._arrays.get(name)
        if buf is None or buf.shape != shape:
            buf = np.empty(shape)
            self._arrays[name] = buf
        return buf


def _check_grid(times: np.ndarray) -> None:
    if times.ndim != 1 or times.size < 1 or times[0] != 0.0 or np.any(np.diff(times) <= 0.0):
        raise ValueError("times must be a 1-d array that starts at 0 and increases")


def _compute_laws(model: ScenarioModel, times: np.ndarray) -> GridLaws:
    k_steps = times.size - 1
    d = len(model.state_names)
    whole_grid = getattr(model, "step_laws", None)  # optional: every step at once
    if callable(whole_grid) and k_steps:
        stacked = whole_grid(times)
        laws = [stacked.law(k) for k in range(k_steps)]
    else:
        laws = [model.step_law(float(times[k]), float(times[k + 1])) for k in range(k_steps)]
    transition = np.empty((k_steps, d, d))
    chol = np.empty((k_steps, d, d))
    eta = np.empty((k_steps, d))
    mean_q = np.empty((k_steps + 1, d))
    mean_p = np.empty((k_steps + 1, d))
    mean_q[0] = mean_p[0] = model.initial_state()
    for k, law in enumerate(laws):
        transition[k] = law.transition
        chol[k] = law.chol
        eta[k] = density_coefficients(law)
        mean_q[k + 1] = law.transition @ mean_q[k] + law.drift
        mean_p[k + 1] = law.transition @ mean_p[k] + (law.drift + law.real_world_shift)
    half_sq_cum = np.zeros(k_steps + 1)
    np.cumsum(0.5 * np.einsum("kd,kd->k", eta, eta), out=half_sq_cum[1:])
    for a in (transition, chol, eta, half_sq_cum, mean_q, mean_p):
        a.flags.writeable = False
    return GridLaws(
        transition=transition,
        chol=chol,
        eta=eta,
        half_sq_cum=half_sq_cum,
        mean={"market_consistent": mean_q, "real_world": mean_p},
    )


_LAWS: OrderedDict[bytes, GridLaws] = OrderedDict()
_LAWS_LOCK = threading.Lock()
_LAWS_KEEP = 8
_BLOCK = 32  # time steps per block of the noise recursion (any value gives the same bits)


def grid_laws(model: ScenarioModel, times: np.ndarray) -> GridLaws:
    """Step laws of ``model`` on ``times`` (computed once per process for each model and grid)."""
    times = np.ascontiguousarray(times, dtype=float)
    _check_grid(times)
    key = hashlib.sha256(pickle.dumps(model, protocol=5) + times.tobytes()).digest()
    with _LAWS_LOCK:  # computing laws is Python-bound: serialising it costs nothing
        laws = _LAWS.get(key)
        if laws is None:
            laws = _compute_laws(model, times)
            _LAWS[key] = laws
            while len(_LAWS) > _LAWS_KEEP:
                _LAWS.popitem(last=False)
        else:
            _LAWS.move_to_end(key)
    return laws


@dataclass(frozen=True, kw_only=True)
class BlockLaws:
    """Coefficients of the densities restricted to blocks of states
    (:func:`pqflow.measure.blocks.gaussian_block_coefficients`): ``coef`` ``(K, n_blocks, d)``,
    ``half_sq_cum`` ``(K + 1, n_blocks)``, the running sum of ``|g|^2 / 2``."""

    coef: np.ndarray
    half_sq_cum: np.ndarray


_BLOCK_LAWS: OrderedDict[bytes, BlockLaws] = OrderedDict()


BlockRows = Sequence[int] | ObservedRows


def _block_key(r: BlockRows) -> tuple:
    if isinstance(r, ObservedRows):
        return (tuple(int(i) for i in r.rows), np.ascontiguousarray(r.extra, dtype=float).tobytes(), r.extra.shape)
    return tuple(int(i) for i in r)


def block_laws(model: ScenarioModel, times: np.ndarray, block_rows: Sequence[BlockRows]) -> BlockLaws:
    """Restricted-density coefficients of each block (state indices ``block_rows``, or
    :class:`pqflow.measure.blocks.ObservedRows` for a block that also sees further functionals
    of the step noise) on ``times``, computed once per process for each model, grid and set of
    blocks."""
    times = np.ascontiguousarray(times, dtype=float)
    laws = grid_laws(model, times)
    rows = tuple(_block_key(r) for r in block_rows)
    key = hashlib.sha256(pickle.dumps((model, rows), protocol=5) + times.tobytes()).digest()
    with _LAWS_LOCK:
        found = _BLOCK_LAWS.get(key)
        if found is not None:
            _BLOCK_LAWS.move_to_end(key)
            return found
    shift = np.einsum("kij,kj->ki", laws.chol, laws.eta)  # m = L eta
    k_steps = times.size - 1
    coef = np.empty((k_steps, len(rows), laws.eta.shape[1]))
    for b, r in enumerate(block_rows):
        if not k_steps:
            coef[:, b, :] = 0.0
        elif isinstance(r, ObservedRows):
            coef[:, b, :] = observed_block_coefficients(laws.chol, shift, r.rows, r.extra)
        else:
            coef[:, b, :] = gaussian_block_coefficients(laws.chol, shift, rows[b])
    half_sq_cum = np.zeros((k_steps + 1, len(rows)))
    np.cumsum(0.5 * np.einsum("kbd,kbd->kb", coef, coef), axis=0, out=half_sq_cum[1:])
    coef.flags.writeable = False
    half_sq_cum.flags.writeable = False
    found = BlockLaws(coef=coef, half_sq_cum=half_sq_cum)
    with _LAWS_LOCK:
        _BLOCK_LAWS[key] = found
        while len(_BLOCK_LAWS) > _LAWS_KEEP:
            _BLOCK_LAWS.popitem(last=False)
    return found


def simulate_states(
    model: ScenarioModel,
    times: np.ndarray,
    *,
    measure: str,
    n_paths: int,
    rng: np.random.Generator,
    antithetic: bool,
    workspace: Workspace | None = None,
    block_rows: Sequence[BlockRows] = (),
) -> SimulatedStates:
    """The simulation core: states and density weights of ``n_paths`` paths under ``measure``.

    Shapes: ``states`` ``(d, n_paths, n_times)``, ``density`` ``(n_paths, n_times)``; the density
    is ``q_density = dQ/dP`` in the real-world set and ``p_density = dP/dQ`` in the
    market-consistent set, on the information up to each output time. ``block_rows``: state
    indices of autonomous blocks whose restricted densities (:mod:`pqflow.measure.blocks`) are
    wanted too, from the same normals: ``block_density`` ``(n_blocks, n_paths, n_times)``. With a
    ``workspace`` the returned arrays are its buffers (valid until its next use).
    """
    if measure not in MEASURES:
        raise ValueError(f"unknown measure {measure!r}: use one of {MEASURES}")
    if n_paths <= 0:
        raise ValueError("n_paths must be positive")
    if antithetic and n_paths % 2:
        raise ValueError("antithetic sampling needs an even number of paths")
    times = np.ascontiguousarray(times, dtype=float)
    laws = grid_laws(model, times)
    k_steps, n_times = times.size - 1, times.size
    d = laws.mean[measure].shape[1]
    n = n_paths // 2 if antithetic else n_paths
    signed_eta = signed_coefficients(laws.eta, measure)[:, None, :]  # (K, 1, d)
    mean = laws.mean[measure]  # (n_times, d)
    half_sq = laws.half_sq_cum  # (n_times,)
    nb = len(block_rows)
    if nb:
        blaws = block_laws(model, times, block_rows)
        signed_g = signed_coefficients(blaws.coef, measure)  # (K, nb, d)
        half_sq_b = blaws.half_sq_cum  # (n_times, nb)

    # Outputs: fresh arrays, or the caller's reused buffers; scratch: block-sized, reused.
    ws = workspace if workspace is not None else Workspace()
    if workspace is None:
        states, density = np.empty((d, n_paths, n_times)), np.empty((n_paths, n_times))
    else:
        states, density = ws.array("states", (d, n_paths, n_times)), ws.array("density", (n_paths, n_times))
    states[:, :, 0] = mean[0][:, None]
    density[:, 0] = 1.0
    block_density: np.ndarray | None = None
    blocks = np.empty((0, 0, 0))  # the restricted densities' array, written only when there are some
    if nb:
        blocks = (
            np.empty((nb, n_paths, n_times)) if workspace is None else ws.array("block_density", (nb, n_paths, n_times))
        )
        blocks[:, :, 0] = 1.0
        block_density = blocks
        lin_b = ws.array("lin_b", (_BLOCK + 1, nb, n))  # running sums of -/+ g_j . z_j per block
        out_wb = ws.array("out_wb", (_BLOCK, nb, n))
        lin_b[0] = 0.0
    even = slice(0, None, 2) if antithetic else slice(None)
    # The noise recursion runs time-major over blocks of _BLOCK steps. A block's normals, noise
    # and density sums stay in cache while the deterministic parts are added and the results
    # are copied into the path-major outputs (plain strided copies, numpy's fastest transfer).
    # Drawing block by block gives exactly the numbers of one (K, d, n) draw.
    z = ws.array("z", (_BLOCK, d, n))
    y = ws.array("y", (_BLOCK + 1, d, n))  # y[0]: noise at the block's first time
    lin = ws.array("lin", (_BLOCK + 1, n))  # running sum of -/+ eta_j . z_j
    out_s = ws.array("out_s", (_BLOCK, d, n))
    out_w = ws.array("out_w", (_BLOCK, n))
    tmp = ws.array("tmp", (d, n))
    y[0] = 0.0
    lin[0] = 0.0
    for k0 in range(0, k_steps, _BLOCK):
        b = min(_BLOCK, k_steps - k0)
        zb, yb, lb, sb, wb = z[:b], y[: b + 1], lin[: b + 1], out_s[:b], out_w[:b]
        rng.standard_normal(out=zb)
        accumulate_exponent(signed_eta[k0 : k0 + b], zb, lb[:, None, :])  # density: measure.density
        np.matmul(laws.chol[k0 : k0 + b], zb, out=yb[1:])
        for j in range(b):
            np.matmul(laws.transition[k0 + j], yb[j], out=tmp)
            yb[j + 1] += tmp
        cols = slice(k0 + 1, k0 + b + 1)
        m_blk = mean[cols][:, :, None]
        h_blk = half_sq[cols][:, None]
        np.add(m_blk, yb[1:], out=sb)  # states = mean + noise
        states[:, even, cols] = sb.transpose(1, 2, 0)
        np.subtract(lb[1:], h_blk, out=wb)  # log density = sum - sum |eta|^2 / 2
        np.exp(wb, out=wb)
        density[even, cols] = wb.T
        if antithetic:  # partner paths: noise -y, log-density sum -l
            np.subtract(m_blk, yb[1:], out=sb)
            states[:, 1::2, cols] = sb.transpose(1, 2, 0)
            np.subtract(-h_blk, lb[1:], out=wb)
            np.exp(wb, out=wb)
            density[1::2, cols] = wb.T
        if nb:  # restricted densities: the same accumulation with the blocks' coefficients
            lbb, wbb = lin_b[: b + 1], out_wb[:b]
            accumulate_exponent(signed_g[k0 : k0 + b], zb, lbb)
            hb_blk = half_sq_b[cols][:, :, None]
            np.subtract(lbb[1:], hb_blk, out=wbb)
            np.exp(wbb, out=wbb)
            blocks[:, even, cols] = wbb.transpose(1, 2, 0)
            if antithetic:
                np.subtract(-hb_blk, lbb[1:], out=wbb)
                np.exp(wbb, out=wbb)
                blocks[:, 1::2, cols] = wbb.transpose(1, 2, 0)
            lin_b[0] = lbb[b]
        y[0] = yb[b]
        lin[0] = lb[b]
    return SimulatedStates(states=states, density=density, block_density=block_density)


def simulate_batch(
    model: ScenarioModel,
    times: np.ndarray,
    *,
    measure: str,
    n_paths: int,
    rng: np.random.Generator,
    antithetic: bool,
    columns: Sequence[str] | None = None,
    workspace: Workspace | None = None,
    density_blocks: Mapping[str, BlockRows] | None = None,
) -> dict[str, np.ndarray]:
    """Simulate ``n_paths`` paths on ``times`` under ``measure``.

    Returns the model's columns (all of them, or only ``columns``; ``cash_account`` is always
    computed) plus ``deflator`` and the density column (``q_density`` = dQ/dP in the
    real-world set, ``p_density`` = dP/dQ in the market-consistent set), each of shape
    ``(n_paths, n_times)``; antithetic pairs are paths ``(2j, 2j+1)``. ``density_blocks``: block
    name -> its state indices (or :class:`pqflow.measure.blocks.ObservedRows`); each adds the
    restricted density ``<density column>_<name>``
    (a block of every state has the full density, which is reused).
    """
    blocks = dict(density_blocks or {})
    d = len(model.state_names)
    whole = [
        name for name, rows in blocks.items() if not isinstance(rows, ObservedRows) and sorted(rows) == list(range(d))
    ]
    partial = {name: rows for name, rows in blocks.items() if name not in whole}
    core = simulate_states(
        model, times, measure=measure, n_paths=n_paths, rng=rng, antithetic=antithetic, workspace=workspace,
        block_rows=tuple(partial.values()),
    )
    times = np.asarray(times, dtype=float)
    if columns is None:
        out = model.columns(times, core.path_states)
    else:
        names = tuple(dict.fromkeys(("cash_account", *columns)))
        out = model.columns(times, core.path_states, names=names)  # type: ignore[call-arg]
    cash = out[CASH_ACCOUNT]
    density = core.density
    buffer = None if workspace is None else workspace.array(DEFLATOR, cash.shape)
    out[DEFLATOR] = deflator(measure, density, cash, out=buffer)
    out[density_column(measure)] = density
    for name in whole:
        out[density_block_column(measure, name)] = density
    for i, name in enumerate(partial):
        assert core.block_density is not None
        out[density_block_column(measure, name)] = core.block_density[i]
    return out


@runtime_checkable
class SubstepScheme(Protocol):
    """One output step of a non-Gaussian part, as :func:`run_substeps` drives it: ``rows``
    standard normals per path and substep; ``begin_step`` sees the step's whole block
    ``(substeps, rows, n_paths)`` (for what is drawn once per step, such as a Brownian bridge),
    ``substep`` advances the paths by one substep of length ``h`` with ``z`` ``(rows, n_paths)``,
    ``end_step`` records the state at the step's end."""

    @property
    def rows(self) -> int: ...

    def begin_step(self, k: int, h: float, block: np.ndarray) -> None: ...

    def substep(self, k: int, j: int, h: float, z: np.ndarray) -> None: ...

    def end_step(self, k: int) -> None: ...


def run_substeps(
    scheme: SubstepScheme,
    times: np.ndarray,
    substeps: int,
    normals: np.random.Generator | np.ndarray,
    *,
    n_paths: int,
    antithetic: bool = False,
) -> None:
    """Drive ``scheme`` over ``times`` with ``substeps`` equal substeps per output step.

    normals: the part's own generator (per output step it draws ``(substeps, rows, n)``, ``n =
    n_paths`` or ``n_paths / 2`` with antithetic sampling, whose partners ``(2j, 2j+1)`` get
    ``z`` and ``-z``), or the numbers themselves, ``(n_steps * substeps, rows, n_paths)``."""
    times = np.asarray(times, dtype=float)
    n_steps, rows = times.size - 1, scheme.rows
    if antithetic and n_paths % 2:
        raise ValueError("antithetic sampling needs an even number of paths")
    n_draw = n_paths // 2 if antithetic else n_paths
    rng = normals if isinstance(normals, np.random.Generator) else None
    given = np.empty((0, rows, n_paths))  # read only when the numbers are given
    if rng is None:
        given = np.asarray(normals, dtype=float)
        if given.shape != (n_steps * substeps, rows, n_paths):
            raise ValueError(
                f"normals must have shape (n_steps * substeps, rows, n_paths) = {(n_steps * substeps, rows, n_paths)}, "
                f"not {given.shape}"
            )
    for k in range(n_steps):
        h = (times[k + 1] - times[k]) / substeps
        if rng is None:
            block = given[k * substeps : (k + 1) * substeps]
        else:
            draw = rng.standard_normal((substeps, rows, n_draw))
            if antithetic:
                block = np.empty((substeps, rows, n_paths))
                block[:, :, 0::2] = draw
                block[:, :, 1::2] = -draw
            else:
                block = draw
        scheme.begin_step(k, h, block)
        for j in range(substeps):
            scheme.substep(k, j, h, block[j])
        scheme.end_step(k)
