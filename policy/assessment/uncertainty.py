"""The uncertainty engine: a bootstrap over cases, done on cell counts.

Every interval the tool reports comes from here. A case bootstrap draws new data sets by
resampling cases; because every figure depends on the cases only through their counts per
cell x arm x decision level x joint outcome state, resampling those counts is the same
bootstrap at a cost that grows with the number of occupied count slots, not with the number of
cases (method notes, section 8).

Resampling schemes (``method``)
-------------------------------
``"poisson"`` (default)
    Each case gets an independent Poisson(1) weight, so each count slot with n cases becomes
    Poisson(n) (Hanley and MacGibbon 2006; Chamandy et al. 2012). Cell sizes vary between
    replicates as they would between new samples of the same population: the intervals are for
    population figures (e.g. the share of all cases that are safe).
``"multinomial"``
    Within each cell x arm, its n cases are redrawn with replacement (a multinomial over that
    cell x arm's count slots): a stratified case bootstrap that holds every cell x arm size at
    its observed value. The intervals are then for the figures *given the observed case mix*
    (e.g. the share of safe cases among these cases), and are narrower.

With joint outcome states (:attr:`policy.inputs.cells.CellTable.state_counts`, known whenever the data
came as a case table) a case's outcome kinds stay together. A counts table holds only the
margins; then the documented fallback draws the cases per cell x arm x level as above and thins
them to observed and to events with binomial draws per outcome kind (Binomial(cases*,
observed/cases), then Binomial(observed*, events/observed)), which treats the outcome kinds of
one case as independent given cell, arm and level. Figures that add outcome kinds (expected
cost) then get intervals that ignore the correlation between kinds; see docs/method.md.

Outcomes of a replicate (``outcome_model``)
-------------------------------------------
By default (no model) each resampled case keeps its own outcomes. Given estimated outcome
probabilities, the cases and which of their outcomes were observed are resampled as above and
the events among the observed are drawn from them (a parametric bootstrap, Laird and Louis
1987). ``compare`` does this by default: for the shrinking cell estimator the nonparametric
bootstrap world (raw cell rates as the truth) is too rough, and its percentile intervals of
risk-level shares are off-centre (measured in docs/method.md). The probabilities it draws from
are those of the liberal world of :mod:`policy.estimation.world` (the estimator with every
covariate-by-level term), so that replicates can keep or miss a term as the estimate did.

Replicates, seeds and workers
-----------------------------
Replicate b draws from its own stream, ``numpy.random.SeedSequence(seed).spawn(B)[b]``, and
replicates are computed in fixed chunks of :data:`CHUNK` whatever the number of workers, each
with single-threaded BLAS (:func:`one_blas_thread`), so the same seed gives the same bits on one
core or many. How chunks are run is isolated behind
:class:`TaskRunner` (``map(fn, shared, tasks)``): :class:`InProcess` here,
:class:`~policy.assessment.workers.LocalProcesses` (worker processes kept for a command) and
:class:`~policy.assessment.workers.Adaptive` (the default: worker processes only when the measured
work pays for them) in :mod:`policy.assessment.workers`,
:class:`policy.running.distributed.DaskRunner` on a Dask cluster (``--run-on``). The task function
:func:`run_chunk` is pure and picklable.

Intervals are bootstrap percentile intervals (Efron and Tibshirani 1993, ch. 13): the
alpha/2 and 1 - alpha/2 quantiles of the replicate values, with numpy's default (linear)
quantile interpolation, as ``scipy.stats.bootstrap(method="percentile")`` uses.

References
----------
Efron, B. and Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall.
Hanley, J. A. and MacGibbon, B. (2006). Creating non-parametric bootstrap samples using
Poisson frequencies. Computer Methods and Programs in Biomedicine 83(1), 57-62.
Chamandy, N., Muralidharan, O., Najmi, A. and Naidu, S. (2012). Estimating uncertainty for
massive data streams. Google technical report.
Laird, N. M. and Louis, T. A. (1987). Empirical Bayes confidence intervals based on bootstrap
samples. JASA 82(399), 739-750.
"""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Mapping, Protocol, Sequence

import numpy as np
import scipy.sparse as sp

from policy.inputs.cells import CellTable
from policy.errors import InputError
from policy.inputs.limits import MAX_REPLICATES
from policy.inputs.scenario import Key, Scenario, read_section, register_section
from policy.assessment.workers import Adaptive, LocalProcesses, available_cores

__all__ = [
    "CHUNK",
    "METHODS",
    "UncertaintySettings",
    "ResampledCounts",
    "CountResampler",
    "TaskRunner",
    "InProcess",
    "LocalProcesses",
    "make_runner",
    "run_chunk",
    "BootstrapResult",
    "bootstrap",
    "bootstrap_risk_levels",
    "percentile_interval",
    "OnRiskLevels",
    "available_cores",
    "one_blas_thread",
]

#: replicates per task; fixed so that results do not depend on the number of workers
CHUNK = 25
#: memory one batch of replicates may take while it is resampled and scored (a chunk of a
#: table with many cells is scored in several batches)
BATCH_BYTES = 512 << 20
#: bytes a replicate takes per cell x arm x decision level while it is resampled and scored by
#: the comparison's statistic (measured: 145 MB per replicate at 85,000 cells, 509,000 cell x
#: arm x level entries; docs/performance.md)
BYTES_PER_SLOT = 300
METHODS = ("poisson", "multinomial")
OUTCOME_DRAWS = ("model", "cases")


# ----------------------------------------------------------------------------------------------
# Scenario section [uncertainty]
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class UncertaintySettings:
    """Settings of the bootstrap, from the scenario's ``[uncertainty]`` section."""

    replicates: int = 1000
    interval: float = 0.95
    resampling: str = "poisson"
    outcomes: str = "model"


UNCERTAINTY_KEYS = (
    Key("replicates", (int,), False, 1000, "number of bootstrap replicates behind every interval (0: point estimates only)"),
    Key("interval", (float,), False, 0.95, "coverage of the percentile intervals, between 0 and 1"),
    Key("resampling", (str,), False, "poisson",
        "'poisson' (cases get Poisson(1) weights: intervals for the population) or 'multinomial' "
        "(cases redrawn within each cell x arm: intervals given the observed case mix)"),
    Key("outcomes", (str,), False, "model",
        "'model' (replicate outcomes drawn from risk levels re-estimated with every covariate-by-level term: the parametric bootstrap that keeps "
        "shrinkage estimates calibrated) or 'cases' (each case keeps its own outcomes: fully nonparametric)"),
)


def _parse_uncertainty(raw: Any, scenario: Scenario) -> UncertaintySettings:
    if raw is None:
        return UncertaintySettings()
    s = read_section(raw, UNCERTAINTY_KEYS, "[uncertainty]", scenario.file)
    return validate_settings(s["replicates"], s["interval"], s["resampling"], f"{scenario.file}: [uncertainty]", s["outcomes"])


def validate_settings(replicates: int, interval: float, resampling: str, where: str,
                      outcomes: str = "model") -> UncertaintySettings:
    """Check bootstrap settings, naming ``where`` they came from in messages."""
    if replicates < 0:
        raise InputError(f"{where} replicates must be >= 0; got {replicates!r}.")
    if replicates > MAX_REPLICATES:
        raise InputError(f"{where} replicates must be at most {MAX_REPLICATES:,} (each is a full re-estimate; the "
                         f"intervals' Monte Carlo error is negligible long before); got {replicates!r}.")
    if not 0 < interval < 1:
        raise InputError(f"{where} interval must lie strictly between 0 and 1 (e.g. 0.95); got {interval!r}.")
    if resampling not in METHODS:
        raise InputError(f"{where} resampling must be one of: {', '.join(METHODS)}; got {resampling!r}.")
    if outcomes not in OUTCOME_DRAWS:
        raise InputError(f"{where} outcomes must be one of: {', '.join(OUTCOME_DRAWS)}; got {outcomes!r}.")
    return UncertaintySettings(int(replicates), float(interval), resampling, outcomes)


register_section("[uncertainty]", UNCERTAINTY_KEYS, _parse_uncertainty)


def scenario_settings(scenario: Any, where: str, replicates: int | None = None, interval: float | None = None,
                      resampling: str | None = None, outcomes: str | None = None) -> UncertaintySettings:
    """The scenario's ``[uncertainty]`` settings with every argument that is not None put in
    their place, checked (messages name ``where``)."""
    base = scenario.sections.get("uncertainty") or UncertaintySettings()
    return validate_settings(base.replicates if replicates is None else replicates,
                             base.interval if interval is None else interval,
                             base.resampling if resampling is None else resampling, where,
                             base.outcomes if outcomes is None else outcomes)


# ----------------------------------------------------------------------------------------------
# Resampled counts
# ----------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class ResampledCounts:
    """A batch of b resampled cell tables (only the counts; the layout is the original's).

    Attributes
    ----------
    cases : ndarray of shape (b, n_cells, n_arms, L)
    observed, events : ndarray of shape (b, n_cells, n_arms, J, L)
    replicate : ndarray of shape (b,)
        Replicate numbers (-1 for the original data).
    """

    cases: np.ndarray
    observed: np.ndarray
    events: np.ndarray
    replicate: np.ndarray

    @property
    def size(self) -> int:
        return self.cases.shape[0]

    @property
    def weights(self) -> np.ndarray:
        """Cases per cell, shape (b, n_cells)."""
        return self.cases.sum(axis=(2, 3))

    @property
    def pooled_events(self) -> np.ndarray:
        """Events pooled over arms, shape (b, n_cells, J, L)."""
        return self.events.sum(axis=2)

    @property
    def pooled_observed(self) -> np.ndarray:
        """Observed cases pooled over arms, shape (b, n_cells, J, L)."""
        return self.observed.sum(axis=2)


class CountResampler:
    """Draws bootstrap replicates of a cell table's counts (see the module notes).

    Parameters
    ----------
    cells : CellTable
    method : {'poisson', 'multinomial'}
    outcome_model : ndarray of shape (n_cells, J, L), optional
        Outcome probabilities to draw replicate outcomes from (the parametric, model-based
        bootstrap): cases, and which of their outcomes were observed, are resampled as without
        it; the events among the observed are then drawn as Binomial(observed*, p[x, j, d]),
        independently per outcome kind. None: each case keeps its own outcomes.

    Attributes
    ----------
    joint : bool
        True when cases are resampled with their joint outcome states (case table input);
        False for the counts-table fallback.
    """

    def __init__(self, cells: CellTable, method: str = "poisson", outcome_model: np.ndarray | None = None):
        if method not in METHODS:
            raise InputError(f"resampling method must be one of: {', '.join(METHODS)}; got {method!r}.")
        self.method = method
        self.shape = cells.cases.shape  # (n, A, L)
        #: what one replicate takes while it is resampled and scored (sizes batches in run_chunk)
        self.bytes_per_replicate = int(np.prod(self.shape)) * BYTES_PER_SLOT
        self.J = len(cells.outcomes)
        n, A, L = self.shape
        self.original = ResampledCounts(
            cells.cases[None].astype(np.float64), cells.observed[None].astype(np.float64),
            cells.events[None].astype(np.float64), np.array([-1]),
        )
        self.joint = cells.state_counts is not None
        # outcome probabilities per (cell, arm, outcome, level) for model-based events
        self.model = None if outcome_model is None else np.broadcast_to(
            np.clip(np.asarray(outcome_model, dtype=np.float64), 0.0, 1.0)[:, None], (n, A, self.J, L))
        if self.joint:
            S = cells.state_counts.shape[-1]
            flat = cells.state_counts.reshape(-1)
            nz = np.flatnonzero(flat)
            self.units = flat[nz].astype(np.float64)
            slot, state = np.divmod(nz, S)  # slot = (cell * A + arm) * L + level
            digits = [(state // 3 ** (self.J - 1 - j)) % 3 for j in range(self.J)]
            m = n * A * L
            # one sparse map from units to [cases | observed_j | events_j] in (cell, arm, level) order
            rows, cols = [np.arange(len(nz))], [slot]
            for j in range(self.J):
                seen = np.flatnonzero(digits[j] > 0)
                rows.append(seen)
                cols.append((1 + j) * m + slot[seen])
            for j in range(self.J):
                ev = np.flatnonzero(digits[j] == 2)
                rows.append(ev)
                cols.append((1 + self.J + j) * m + slot[ev])
            r, c = np.concatenate(rows), np.concatenate(cols)
            self.to_margins = sp.csr_matrix((np.ones(len(r)), (c, r)), shape=((1 + 2 * self.J) * m, len(nz)))
            self.group = slot // L  # cell * A + arm
        else:
            flat = cells.cases.reshape(-1)
            nz = np.flatnonzero(flat)
            self.units = flat[nz].astype(np.float64)
            self.slots = nz
            obs = np.moveaxis(cells.observed, 2, -1).reshape(-1, self.J)[nz].astype(np.float64)  # (units, J)
            ev = np.moveaxis(cells.events, 2, -1).reshape(-1, self.J)[nz].astype(np.float64)
            self.p_observed = obs / self.units[:, None]
            with np.errstate(invalid="ignore", divide="ignore"):
                self.p_event = np.where(obs > 0, ev / np.where(obs > 0, obs, 1), 0.0)
            self.group = nz // L
        if method == "multinomial":
            # units are stored group by group (cell, arm lead the flat order): pad to a matrix
            groups, start, size = np.unique(self.group, return_index=True, return_counts=True)
            self.group_size = np.bincount(np.searchsorted(groups, self.group), weights=self.units).astype(np.int64)
            width = int(size.max())
            pos = np.arange(len(self.units)) - np.repeat(start, size)
            self.pad_index = (np.repeat(np.arange(len(groups)), size), pos)
            pvals = np.zeros((len(groups), width))
            pvals[self.pad_index] = self.units
            self.pvals = pvals / pvals.sum(axis=1, keepdims=True)

    def _draw_units(self, rng: np.random.Generator) -> np.ndarray:
        if self.method == "poisson":
            return rng.poisson(self.units).astype(np.float64)
        padded = rng.multinomial(self.group_size, self.pvals)
        return padded[self.pad_index].astype(np.float64)

    def draw(self, seeds: Sequence[np.random.SeedSequence], replicate_ids: Sequence[int] | None = None) -> ResampledCounts:
        """One replicate per seed, as a batch."""
        n, A, L = self.shape
        J = self.J
        b = len(seeds)
        ids = np.arange(b) if replicate_ids is None else np.asarray(replicate_ids)
        rngs = [np.random.default_rng(s) for s in seeds]
        if self.joint:
            units = np.stack([self._draw_units(rng) for rng in rngs], axis=1)  # (nnz, b)
            margins = np.asarray(self.to_margins @ units).T.reshape(b, 1 + 2 * J, n, A, L)
            cases = margins[:, 0]
            observed = np.moveaxis(margins[:, 1:1 + J], 1, 3)
            events = np.moveaxis(margins[:, 1 + J:], 1, 3)
        else:
            cases = np.zeros((b, n * A * L))
            observed = np.zeros((b, n * A * L, J))
            events = np.zeros((b, n * A * L, J))
            for i, rng in enumerate(rngs):
                u = self._draw_units(rng)
                o = rng.binomial(u[:, None].astype(np.int64), self.p_observed)
                cases[i, self.slots] = u
                observed[i, self.slots] = o
                if self.model is None:
                    events[i, self.slots] = rng.binomial(o, self.p_event)
            cases = cases.reshape(b, n, A, L)
            observed = np.moveaxis(observed.reshape(b, n, A, L, J), -1, 3)
            events = np.moveaxis(events.reshape(b, n, A, L, J), -1, 3)
        if self.model is not None:
            events = np.stack([rng.binomial(observed[i].astype(np.int64), self.model) for i, rng in enumerate(rngs)]).astype(np.float64)
        return ResampledCounts(cases, observed, events, ids)


# ----------------------------------------------------------------------------------------------
# How tasks are run
# ----------------------------------------------------------------------------------------------
class TaskRunner(Protocol):
    """Runs independent tasks ``fn(shared, task)`` and returns their results in task order.

    ``shared`` is sent to each worker once (a distributed runner would scatter it);
    ``on_done(i)`` is called in the caller's process when task ``i`` has finished.
    """

    workers: int

    def map(self, fn: Callable[[Any, Any], Any], shared: Any, tasks: Sequence[Any],
            on_done: Callable[[int], None] | None = None) -> list: ...


class InProcess:
    """Run every task in this process, one after the other."""

    workers = 1

    def map(self, fn, shared, tasks, on_done=None):
        out = []
        for i, task in enumerate(tasks):
            out.append(fn(shared, task))
            if on_done is not None:
                on_done(i)
        return out


def one_blas_thread():
    """Context in which BLAS uses one thread: a matrix product then gives the same bits whether
    it runs here, in a worker process or on a cluster node (multi-threaded BLAS may split sums
    differently). Replicates are spread over processes instead."""
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")


def make_runner(workers: int | None = None, tasks: int | None = None) -> TaskRunner:
    """In-process for one worker, local processes for more; ``None``: :class:`Adaptive` (this
    process, or up to every idle core when the measured work pays for starting workers).
    ``tasks`` caps the processes. A runner made here is closed by its caller after its map."""
    if workers is None:
        return Adaptive(None if tasks is None else max(min(available_cores(), tasks), 1))
    n = int(workers)
    if n < 1:
        raise InputError(f"workers must be a positive number; got {workers!r}.")
    if tasks is not None:
        n = min(n, max(tasks, 1))
    return InProcess() if n == 1 else LocalProcesses(n)


# ----------------------------------------------------------------------------------------------
# The bootstrap
# ----------------------------------------------------------------------------------------------
Statistic = Callable[[ResampledCounts], Mapping[str, np.ndarray]]


@dataclass(frozen=True)
class _Chunk:
    first: int
    seeds: tuple


def run_chunk(shared: tuple, task: _Chunk) -> dict[str, np.ndarray]:
    """The pure task: resample one chunk of replicates and apply the statistic (a chunk without
    seeds applies it to the data themselves: the point estimates, run beside the replicates)."""
    resampler, statistic = shared
    with one_blas_thread():
        if not task.seeds:
            return {k: np.asarray(v) for k, v in statistic(resampler.original).items()}
        # a chunk is drawn and scored in batches small enough for its cells (every statistic
        # scores each replicate on its own, so batches give the same numbers as the whole chunk)
        per = max(1, min(len(task.seeds), int(BATCH_BYTES // max(resampler.bytes_per_replicate, 1))))
        parts = []
        for start in range(0, len(task.seeds), per):
            seeds = task.seeds[start:start + per]
            batch = resampler.draw(seeds, np.arange(task.first + start, task.first + start + len(seeds)))
            parts.append({k: np.asarray(v) for k, v in statistic(batch).items()})
            del batch
        return parts[0] if len(parts) == 1 else {k: np.concatenate([p[k] for p in parts], axis=0) for k in parts[0]}


def percentile_interval(values: np.ndarray, level: float = 0.95, axis: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Bootstrap percentile interval: the (1 - level)/2 and (1 + level)/2 quantiles along ``axis``.

    Replicates where a figure is undefined (NaN) are left out; a figure undefined in more than
    half of the replicates gets no interval (NaN).
    """
    values = np.asarray(values, dtype=np.float64)
    alpha = 1.0 - level
    finite = np.isfinite(values)
    with np.errstate(invalid="ignore"), _quiet_nan_warnings():
        lo, hi = np.nanpercentile(values, [100 * alpha / 2, 100 * (1 - alpha / 2)], axis=axis)
    enough = finite.sum(axis=axis) * 2 > values.shape[axis]
    return np.where(enough, lo, np.nan), np.where(enough, hi, np.nan)


@contextmanager
def _quiet_nan_warnings() -> Iterator[None]:
    import warnings

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="All-NaN slice encountered", category=RuntimeWarning)
        yield


@dataclass(frozen=True)
class BootstrapResult:
    """Point estimates and bootstrap replicates of named figures.

    Attributes
    ----------
    point : dict of str to ndarray
        Each figure computed on the data themselves.
    replicates : dict of str to ndarray of shape (B, ...)
        Each figure in every replicate (empty arrays when B = 0).
    n_replicates, seed : int
    method : str
    level : float
        Coverage of the intervals.
    joint_states : bool
        Whether cases' joint outcome states were resampled (False: counts-table fallback or
        model-based outcomes).
    outcomes : str
        'cases' (cases keep their outcomes) or 'model' (outcomes drawn from estimated risk).
    """

    point: Mapping[str, np.ndarray]
    replicates: Mapping[str, np.ndarray]
    n_replicates: int
    seed: int
    method: str
    level: float
    joint_states: bool = True
    outcomes: str = "cases"

    def interval(self, name: str, level: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Percentile interval of a figure (NaN everywhere without replicates)."""
        point = np.asarray(self.point[name], dtype=np.float64)
        if self.n_replicates == 0:
            return np.full(point.shape, np.nan), np.full(point.shape, np.nan)
        return percentile_interval(self.replicates[name], self.level if level is None else level)

    def standard_error(self, name: str) -> np.ndarray:
        if self.n_replicates < 2:
            return np.full(np.shape(self.point[name]), np.nan)
        with _quiet_nan_warnings(), np.errstate(invalid="ignore"):
            return np.nanstd(self.replicates[name], axis=0, ddof=1)

    @property
    def interval_label(self) -> str:
        return f"{self.level:.0%} bootstrap percentile interval" if self.n_replicates else "no interval (no replicates)"

    def meta(self) -> dict[str, Any]:
        """What every output records about its intervals."""
        return {
            "replicates": self.n_replicates,
            "seed": self.seed,
            "resampling": self.method,
            "outcomes": self.outcomes,
            "interval": self.interval_label,
            "joint_outcome_states": self.joint_states,
        }


def bootstrap(cells: CellTable, statistic: Statistic, replicates: int = 1000, seed: int | None = None,
              method: str = "poisson", level: float = 0.95, runner: TaskRunner | None = None,
              workers: int | None = None, progress: bool = False, description: str = "bootstrap",
              outcome_model: np.ndarray | None = None) -> BootstrapResult:
    """Apply ``statistic`` to the data and to ``replicates`` resampled copies of their counts.

    Parameters
    ----------
    cells : CellTable
    statistic : callable
        ``statistic(batch: ResampledCounts) -> {name: ndarray of shape (b, ...)}``; vectorized
        over the batch's leading axis. It must be picklable to run in worker processes (a
        top-level function or an instance of a top-level class; see :class:`OnRiskLevels`).
    replicates : int
        B (0: point estimates only).
    seed : int or None
        Root seed; None draws fresh entropy, which is recorded in the result.
    method : {'poisson', 'multinomial'}
    level : float
        Coverage of the percentile intervals.
    outcome_model : ndarray of shape (n_cells, J, L), optional
        Draw replicate outcomes from these probabilities (see :class:`CountResampler`); None:
        resample cases with their own outcomes.
    runner : TaskRunner, optional
        How chunks of replicates are run (default: :func:`make_runner` with ``workers``).
    workers : int, optional
        Processes when no runner is given (default: every available core).
    progress : bool
        Show a progress bar (rich, on standard error).

    Returns
    -------
    BootstrapResult
    """
    validate_settings(replicates, level, method, "bootstrap:")
    outcomes = "cases" if outcome_model is None else "model"
    root = np.random.SeedSequence(seed)
    seed_used = int(root.entropy)
    resampler = CountResampler(cells, method, outcome_model)
    if replicates == 0:
        point = {k: v[0] for k, v in run_chunk((resampler, statistic), _Chunk(-1, ())).items()}
        empty = {k: np.empty((0,) + v.shape) for k, v in point.items()}
        return BootstrapResult(point, empty, 0, seed_used, method, level, resampler.joint, outcomes)
    children = root.spawn(replicates)
    # the point estimates are one more task, first, so that they run beside the replicates
    tasks = [_Chunk(-1, ())] + [_Chunk(i, tuple(children[i:i + CHUNK])) for i in range(0, replicates, CHUNK)]
    own = runner is None
    runner = runner or make_runner(workers, len(tasks) - 1)
    try:
        with _progress(progress, description, replicates) as advance:
            parts = runner.map(run_chunk, (resampler, statistic), tasks,
                               None if advance is None else (lambda i: advance(len(tasks[i].seeds))))
    finally:
        if own and hasattr(runner, "close"):
            runner.close()
    point = {k: np.asarray(v)[0] for k, v in parts[0].items()}
    reps = {k: np.concatenate([p[k] for p in parts[1:]], axis=0) for k in point}
    return BootstrapResult(point, reps, replicates, seed_used, method, level, resampler.joint, outcomes)


@contextmanager
def _progress(show: bool, description: str, total: int) -> Iterator[Callable[[int], None] | None]:
    if not show:
        yield None
        return
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

    columns = (TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(), TimeRemainingColumn())
    with Progress(*columns, console=Console(stderr=True), transient=True) as bar:
        task = bar.add_task(description, total=total)
        yield lambda k: bar.advance(task, k)


# ----------------------------------------------------------------------------------------------
# Statistics of re-estimated risk levels (what the comparison and the sweeps bootstrap)
# ----------------------------------------------------------------------------------------------
class OnRiskLevels:
    """A picklable statistic that re-estimates risk levels in each replicate, then applies ``fn``.

    Parameters
    ----------
    fn : callable
        ``fn(p, batch) -> {name: ndarray of shape (b, ...)}`` with ``p`` of shape
        (b, n_cells, J, L) (outcome probabilities under each decision, monotone) and ``batch``
        the :class:`ResampledCounts` (its ``weights`` are the replicate's cell weights). Must be
        a top-level function (or picklable callable) to run in worker processes.
    estimator : RiskLevelEstimator
    design : ndarray
        The estimator's design for the cells (``estimator.design(cells.layout, L)``).

    Examples
    --------
    >>> def safe_share(p, batch):                                   # doctest: +SKIP
    ...     q0 = 1 - p[..., 0, 0]                                   # safe on the first outcome
    ...     w = batch.weights
    ...     return {"safe": (w * q0).sum(-1) / w.sum(-1)}
    >>> result = bootstrap(cells, OnRiskLevels(safe_share, est, est.design(cells.layout, L)))  # doctest: +SKIP
    >>> result.interval("safe")                                     # doctest: +SKIP
    """

    def __init__(self, fn: Callable[[np.ndarray, ResampledCounts], Mapping[str, np.ndarray]], estimator, design: np.ndarray):
        self.fn = fn
        self.estimator = estimator
        self.design = design

    def __call__(self, batch: ResampledCounts) -> Mapping[str, np.ndarray]:
        p, _, _ = self.estimator.estimate_p(batch.pooled_events, batch.pooled_observed, self.design)
        return self.fn(p, batch)


def bootstrap_risk_levels(cells: CellTable, fn: Callable[[np.ndarray, ResampledCounts], Mapping[str, np.ndarray]],
                          estimator, replicates: int = 1000, seed: int | None = None, method: str = "poisson",
                          level: float = 0.95, outcomes: str = "model", **kwargs) -> BootstrapResult:
    """Percentile intervals for any figures computed from re-estimated risk levels.

    The entry point for later stages (e.g. sweeps): ``fn(p, batch)`` gets the replicates' outcome
    probabilities p of shape (b, n_cells, J, L) and the resampled counts, and returns
    ``{name: ndarray of shape (b, ...)}``; the result holds each figure on the data, its
    replicates and :meth:`BootstrapResult.interval`.

    Parameters
    ----------
    cells : CellTable
    fn : callable
        Top-level function (picklable), vectorized over the batch axis.
    estimator : RiskLevelEstimator
    replicates, seed, method, level :
        As for :func:`bootstrap`.
    outcomes : {'model', 'cases'}
        Draw replicate events from the liberal bootstrap world (default; the estimator with every
        covariate-by-level term, :mod:`policy.estimation.world`) or keep each case's own.
    **kwargs :
        ``runner``, ``workers``, ``progress``, ``description`` (see :func:`bootstrap`).
    """
    settings = validate_settings(replicates, level, method, "bootstrap:", outcomes)
    design = estimator.design(cells.layout, len(cells.levels))
    model = None
    if settings.outcomes == "model":
        from policy.estimation.world import world_probabilities

        with one_blas_thread():
            model = world_probabilities(estimator, cells)
    return bootstrap(cells, OnRiskLevels(fn, estimator, design), replicates, seed, method, level,
                     outcome_model=model, **kwargs)
