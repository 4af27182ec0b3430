"""Tolerance runs: resistor tolerance, β spread, V_BE(on) spread and ambient temperature, sampled.

What is varied (each stage's parts; the signal source and the load are the outside world and stay
as they are):

* every fitted stage resistor (every stage value in ohms): R·(1 + t·x), t the tolerance;
* each stage transistor's β: β·exp(c + h·x) with c, h the centre and half-width of
  [ln lo, ln hi], so a uniform draw is uniform in ln β over the factor range (a 3:1 spread is
  multiplicative, and the range (0.5, 2) is centred on the nominal β);
* each stage transistor's V_BE(on): V_BE(on) + d·x volts (constant-drop). Under Ebers–Moll the
  same shift of the junction voltage at a given current is a change of saturation current,
  I_S·exp(−d·x/(n·V_T)) with V_T = kT/q at 25 °C (the exponential junction law), varied as
  ``sN.device.saturation_current``;
* the ambient temperature ("temperature"): centre + half-width·x over the range. The solver moves
  each device with it as it always does (:func:`ampplan.devices.scaled_to_temperature`): V_BE(on)
  by the device's ``vbe_temperature_coefficient`` (−2 mV/°C by default, common practice, no
  source), I_S by its temperature law (Gray & Meyer, from memory). The solver holds β constant, so
  the run moves β itself: β·(1 + k·(T − 25 °C)) with k = ``beta_temperature_coefficient``
  (+0.5 %/°C by default: β of a silicon transistor rises with temperature; the figure is common
  practice for small-signal parts, from memory, no source). The factor is part of the sampled β,
  so re-solving a sample from :attr:`ToleranceResult.parameters` gives the same answer.

x is uniform on [−1, 1] (``distribution="uniform"``) or z/3 with z standard normal
(``"normal"``: the tolerance is 3σ; z is clipped at ±6, one draw in 500 million, so resistances
stay positive). A normal draw thus reaches two tolerances either side of the nominal value; every
value a draw can reach (the ends of each range, twice as far for ``"normal"``) is checked against
the plan's own bounds before anything is solved, so a run never fails half-way on a value the
plan refuses.

**Seeding.** Sample k is drawn from block k // 8192, and block b draws from
``SeedSequence(seed).spawn(...)[b]``, independently of every other block. The samples are a
function of the seed and k alone, never of the chunking or of the executor that runs the chunks.

**Worker processes.** A run of at least :data:`PARALLEL_SAMPLES` samples with no executor given
spreads its chunks over one process per core: this one and worker processes (forked from it, so
they start at once with everything already imported and planned), where the platform can fork and
this process runs no other thread (a script, the command line; in a Jupyter kernel, which runs
several, the chunks run here unless an executor is passed). This process takes the chunks from
the end, the workers from the start. The workers write the numbers of their chunks straight into
columns shared with this process (:func:`share_columns`), so only the words travel back. Each
chunk's answer is its own, whichever process solves it, so the result is the same either way;
``workers=1`` keeps every chunk in this process.
"""

from __future__ import annotations

import concurrent.futures
import html
import math
import multiprocessing
import numbers
import os
import signal
import threading
from dataclasses import dataclass, field
from functools import cached_property
from typing import Literal, get_args

import numpy as np
from scipy import stats

from ...devices import REFERENCE_TEMPERATURE, thermal_voltage
from ...errors import AmpplanError, InvalidValueError, UnknownModelError
from ...units import format_quantity
from .sweeps import RESOLUTION, PlanSweep, check_model, passed_rule, solve_table
from .tables import SharedColumns, TableBuilder

__all__ = ["Distribution", "DISTRIBUTIONS", "Spread", "ToleranceSpec", "ToleranceResult", "ToleranceSample",
           "tolerance", "spreads_of", "run_chunks", "values_at", "worker_count", "process_pool", "BLOCK",
           "PARALLEL_SAMPLES", "PERCENTILES"]

Distribution = Literal["uniform", "normal"]
DISTRIBUTIONS: tuple[str, ...] = get_args(Distribution)

#: Samples per independently seeded block.
BLOCK = 8192
#: Default samples per chunk handed to the batched solver. The batched analyses hold about 7 kB
#: per sample of a 3-stage plan while they run, so the chunk, not the run, sets the working memory:
#: 8,192 samples (one seeding block) is about 60 MB; smaller chunks pay more per sample for the
#: per-chunk work.
CHUNK = 8192
#: Percentiles reported for the margins and the swing.
PERCENTILES = (1, 5, 50, 95, 99)
#: A run of at least this many samples, with no executor given, uses worker processes (see the
#: module docstring); below it, starting them costs more than they save.
PARALLEL_SAMPLES = 4 * CHUNK
#: β rises with temperature by this fraction per °C (common practice, from memory, no source).
BETA_TEMPERATURE_COEFFICIENT = 0.005
#: A normal draw z is clipped at ±this many σ (x = z/3 reaches ±2 tolerances).
NORMAL_CLIP = 6.0
#: The largest |x| a draw reaches, per distribution.
REACH = {"uniform": 1.0, "normal": NORMAL_CLIP / 3.0}


@dataclass(frozen=True)
class Spread:
    """How one plan value is varied.

    ``value = nominal · (1 + half·x)`` (``kind="relative"``), ``nominal · exp(centre + half·x)``
    (``"log"``), ``nominal + centre + half·x`` (``"absolute"``); x as in the module docstring.
    """
    address: str
    kind: str
    nominal: float
    centre: float
    half: float

    def apply(self, x: np.ndarray) -> np.ndarray:
        if self.kind == "relative":
            return self.nominal * (1.0 + self.half * x)
        if self.kind == "log":
            return self.nominal * np.exp(self.centre + self.half * x)
        return self.nominal + self.centre + self.half * x

    @property
    def low(self) -> float:
        return float(self.apply(np.array(-1.0)))

    @property
    def high(self) -> float:
        return float(self.apply(np.array(1.0)))


@dataclass(frozen=True)
class ToleranceSpec:
    """Everything a chunk needs to draw and solve its samples (plain data, picklable)."""
    spreads: tuple
    entropy: int
    distribution: str
    model: str
    beta_temperature_coefficient: float
    required_amplitude: float | None


def _fraction(value, name: str, upper: float) -> float:
    if value is None:
        return 0.0
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not 0 <= value < upper:
        raise InvalidValueError(f"tolerance {name}: must be a number from 0 to below {upper:g}, got {value!r}")
    return float(value)


def _range(value, name: str, positive: bool):
    if value is None:
        return None
    try:
        lo, hi = (float(v) for v in value)
    except (TypeError, ValueError):
        raise InvalidValueError(f"tolerance {name}: must be a (low, high) pair of numbers, got {value!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo > hi or (positive and lo <= 0):
        need = "0 < low <= high" if positive else "low <= high"
        raise InvalidValueError(f"tolerance {name}: need finite {need}, got {value!r}")
    return lo, hi


def spreads_of(plan, model: str, resistors=0.05, beta=(0.5, 2.0), vbe_on=0.01, temperature=(0.0, 50.0),
               distribution: str = "uniform", beta_temperature_coefficient=BETA_TEMPERATURE_COEFFICIENT) -> tuple:
    """The :class:`Spread` of every varied plan value, in a fixed order (stage by stage, then temperature)."""
    if distribution not in DISTRIBUTIONS:
        raise UnknownModelError(f"distribution must be one of {', '.join(DISTRIBUTIONS)}, got {distribution!r}")
    # A normal draw is clipped at 6 sigma = 2 tolerances: resistances stay positive below 50 %.
    t = _fraction(resistors, "resistors", 0.5 if distribution == "normal" else 1.0)
    beta_range = _range(beta, "beta", positive=True)
    dv = _fraction(vbe_on, "vbe_on (volts)", 0.5)
    temperatures = _range(temperature, "temperature", positive=False)
    if (isinstance(beta_temperature_coefficient, bool) or not isinstance(beta_temperature_coefficient, numbers.Real)
            or not math.isfinite(beta_temperature_coefficient)):
        raise InvalidValueError(f"tolerance beta_temperature_coefficient: must be a finite number per °C, got "
                                f"{beta_temperature_coefficient!r}")
    reach = REACH[distribution]
    normal = " (a normal draw, clipped at ±6σ, reaches twice the tolerance)" if distribution == "normal" else ""
    if temperatures is not None:
        lo, hi = temperatures
        centre, half = (lo + hi) / 2, (hi - lo) / 2
        ends = temperatures if distribution == "uniform" else (centre - reach * half, centre + reach * half)
        for end in ends:
            if 1.0 + beta_temperature_coefficient * (end - REFERENCE_TEMPERATURE) <= 0:
                raise InvalidValueError(f"tolerance temperature {end:g} °C: the β temperature factor "
                                        f"1 + {beta_temperature_coefficient:g}·(T − 25) is not positive there"
                                        + (f"; a normal draw over {lo:g} … {hi:g} °C reaches {ends[0]:g} … "
                                           f"{ends[1]:g} °C (±6σ)" if distribution == "normal" else ""))
            trial = plan.copy()
            try:
                trial.set("temperature", end)
            except InvalidValueError as exc:
                reached = (f"a normal draw reaches {ends[0]:g} … {ends[1]:g} °C (the range is ±3σ, draws are "
                           "clipped at ±6σ): " if distribution == "normal" else "")
                raise InvalidValueError(f"tolerance temperature: {reached}{exc}") from None
    spreads = []     # (option, Spread): the option names the culprit when a reached value is refused
    for sid in plan.stage_ids:
        stage = plan.stage(sid)
        if t > 0:
            for name, value in stage.parameters().items():
                address = f"{sid}.{name}"
                if value is not None and plan.unit(address) == "Ω":
                    spreads.append(("resistors", Spread(address, "relative", float(value), 0.0, t)))
        if beta_range is not None and beta_range != (1.0, 1.0):
            lo, hi = math.log(beta_range[0]), math.log(beta_range[1])
            spreads.append(("beta", Spread(f"{sid}.device.beta", "log", float(stage.device.beta), (lo + hi) / 2,
                                           (hi - lo) / 2)))
        elif temperatures is not None and beta_temperature_coefficient != 0:
            spreads.append(("beta", Spread(f"{sid}.device.beta", "log", float(stage.device.beta), 0.0, 0.0)))
        if dv > 0:
            if model == "ebers-moll":
                n = stage.device.emission_coefficient
                spreads.append(("vbe_on", Spread(f"{sid}.device.saturation_current", "log",
                                                 float(stage.device.saturation_current), 0.0,
                                                 dv / (n * thermal_voltage(REFERENCE_TEMPERATURE)))))
            else:
                spreads.append(("vbe_on", Spread(f"{sid}.device.vbe_on", "absolute", float(stage.device.vbe_on),
                                                 0.0, dv)))
    # Every value a draw can reach must be one the plan takes (β's temperature factor is checked
    # above, and the temperature itself).
    trial = plan.copy()
    for option, spread in spreads:
        for x in (-reach, reach):
            value = float(spread.apply(np.array(x)))
            try:
                trial.set(spread.address, value)
            except AmpplanError as exc:
                raise InvalidValueError(f"tolerance {option}: {spread.address} reaches "
                                        f"{format_quantity(value, plan.unit(spread.address))}{normal}: {exc}") from None
        trial.set(spread.address, spread.nominal)
    spreads = [spread for _, spread in spreads]
    if temperatures is not None:
        lo, hi = temperatures
        spreads.append(Spread("temperature", "absolute", 0.0, (lo + hi) / 2, (hi - lo) / 2))
    return tuple(spreads)


def draw(spec: ToleranceSpec, start: int, stop: int) -> dict:
    """Plan address -> sampled values of samples ``start`` … ``stop - 1`` (see the module docstring)."""
    p = len(spec.spreads)
    first, last = start // BLOCK, (stop - 1) // BLOCK
    children = np.random.SeedSequence(spec.entropy).spawn(last + 1)[first:]
    blocks = []
    for child in children:
        rng = np.random.default_rng(child)
        if spec.distribution == "normal":
            blocks.append(np.clip(rng.standard_normal((BLOCK, p)), -NORMAL_CLIP, NORMAL_CLIP) / 3.0)
        else:
            blocks.append(rng.random((BLOCK, p)) * 2.0 - 1.0)
    return values_at(spec, np.concatenate(blocks)[start - first * BLOCK: stop - first * BLOCK])


def values_at(spec: ToleranceSpec, x: np.ndarray) -> dict:
    """Plan address -> values for the unit variates ``x`` of shape (S, number of spreads), with β
    moved by the temperature of each sample (see the module docstring)."""
    values = {s.address: s.apply(x[:, j]) for j, s in enumerate(spec.spreads)}
    temperature = values.get("temperature")
    if temperature is not None and spec.beta_temperature_coefficient != 0:
        factor = 1.0 + spec.beta_temperature_coefficient * (temperature - REFERENCE_TEMPERATURE)
        for address in values:
            if address.endswith(".device.beta"):
                values[address] = values[address] * factor
    return values


def run_chunk(plan, spec: ToleranceSpec, start: int, stop: int) -> tuple:
    """Draw and solve samples ``start`` … ``stop - 1``: (parameters, table, passed)."""
    values = draw(spec, start, stop)
    if not values:  # nothing varied: every sample is the plan itself
        values = {"temperature": np.full(stop - start, float(plan.temperature))}
        table = solve_table(plan, spec.model, values)
        values = {}
    else:
        table = solve_table(plan, spec.model, values)
    passed = passed_rule(table, plan.stage_ids, spec.required_amplitude)
    return values, table, passed


def run_chunks(plan, spec: ToleranceSpec, samples: int, chunk_size: int, executor=None, progress=None,
               shared=None, workers: int | None = None) -> tuple:
    """Run every chunk (in order, or through ``executor``) and assemble the whole run.

    ``progress(done, total)`` is called after each chunk. A KeyboardInterrupt cancels the chunks
    not yet started and is raised again. ``shared`` (a token of :func:`share_columns`, with an
    executor of processes forked after it was made) has the workers write the numbers into the
    run's shared columns instead of sending them back. With ``workers`` (the executor's number
    of processes), this process runs chunks too: the workers take the chunks from the start, one
    at a time each (the next handed over as one finishes, so none waits queued behind a busy
    worker while this process could run it), and this process takes them from the end.
    """
    bounds = [(a, min(a + chunk_size, samples)) for a in range(0, samples, chunk_size)]
    held = _SHARED.get(shared)
    if held is None:
        parameters, table, passed = TableBuilder(samples), TableBuilder(samples), np.zeros(samples, dtype=bool)
    else:
        parameters, table = TableBuilder(samples, held[0].columns), TableBuilder(samples, held[1].columns)
        passed = held[2].columns["passed"]
    done = 0

    def keep(start, stop, chunk):
        nonlocal done
        values, rows, ok = chunk
        if values:
            parameters.put(start, values)
        if rows:
            table.put(start, rows)
        if ok is not None:
            passed[start:start + len(ok)] = ok
        done += stop - start
        if progress is not None:
            progress(done, samples)

    if executor is None:
        for start, stop in bounds:
            keep(start, stop, run_chunk(plan, spec, start, stop))
        return parameters.table(), table.table(), passed
    task = (run_chunk,) if shared is None else (_run_chunk_shared, shared)
    futures: dict = {}
    # The chunks left and the futures, shared with the pool's thread (reentrant: cancelling a
    # future runs its callback in the thread that cancels).
    lock = threading.RLock()
    left = list(reversed(bounds))    # the next chunk for a worker last, the next one for here first
    stopped = False

    def hand_over(_=None):
        """Give the executor the first chunk left; with ``workers``, called again (from the
        pool's thread) as each chunk finishes."""
        with lock:
            if stopped or not left:
                return
            start, stop = left.pop()
            future = executor.submit(*task, plan, spec, start, stop)
            futures[future] = (start, stop)
        if workers is not None:
            future.add_done_callback(hand_over)

    try:
        for _ in range(len(bounds) if workers is None else workers):
            hand_over()
        while True:
            with lock:
                mine = left.pop(0) if workers is not None and left else None
                finished = [f for f in futures if f.done()] if mine is not None else None
            if mine is None:                   # nothing left to run here: wait for the workers
                with lock:
                    running = list(futures)
                if not running:
                    break
                finished, _ = concurrent.futures.wait(running, return_when=concurrent.futures.FIRST_COMPLETED)
            for future in finished:
                with lock:
                    start, stop = futures.pop(future)   # dropped once kept: a run holds one copy of its results
                keep(start, stop, future.result())
            if mine is not None:
                keep(*mine, run_chunk(plan, spec, *mine))
    except BaseException:
        with lock:
            stopped = True
            for future in futures:
                future.cancel()
        raise
    return parameters.table(), table.table(), passed


#: The shared columns of the runs in progress, by token (:func:`share_columns`): worker processes
#: forked after a run's columns were made find them here.
_SHARED: dict = {}


def share_columns(samples: int, probe: tuple) -> int:
    """Shared columns for a run of ``samples`` laid out like ``probe`` (a :func:`run_chunk` answer):
    every number and flag column of the parameters, the table and ``passed``. Returns the token
    that :func:`run_chunks` takes; :func:`unshare_columns` lets go of them (the run's result keeps
    what it holds)."""
    values, rows, _ = probe
    numbers_of = lambda chunk: {name: np.asarray(a).dtype for name, a in chunk.items()  # noqa: E731
                                if np.asarray(a).dtype.kind in "fb"}
    token = max(_SHARED, default=0) + 1
    _SHARED[token] = (SharedColumns(samples, numbers_of(values)), SharedColumns(samples, numbers_of(rows)),
                      SharedColumns(samples, {"passed": np.dtype(bool)}))
    return token


def unshare_columns(token: int) -> None:
    """Forget the shared columns of a finished run."""
    _SHARED.pop(token, None)


def _run_chunk_shared(token: int, plan, spec: ToleranceSpec, start: int, stop: int) -> tuple:
    """:func:`run_chunk` in a forked worker: the numbers written into the run's shared columns,
    the rest (the words) returned, with None for ``passed`` (written too)."""
    values, rows, ok = run_chunk(plan, spec, start, stop)
    parameters, table, passed = _SHARED[token]
    out = (parameters.write(start, values), table.write(start, rows),
           passed.write(start, {"passed": ok}).get("passed"))
    for columns in (parameters, table, passed):
        columns.release()
    return out


def _ignore_interrupt() -> None:
    """Worker start-up: Ctrl-C is the parent's to handle (it cancels the run), not each worker's."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def worker_count(samples: int, chunk_size: int, workers=None) -> int:
    """How many processes run the chunks of a run when no executor is given: this one and one
    fewer worker processes (1: this one alone).

    ``workers`` None chooses: one per core available to this process, for runs of at least
    :data:`PARALLEL_SAMPLES` samples, where the platform can fork and this process runs no other
    thread (forking a threaded process can leave a lock held in the child); never more than the
    chunks.
    """
    chunks = -(-samples // chunk_size)
    if workers is None:
        if (samples < PARALLEL_SAMPLES or threading.active_count() > 1
                or "fork" not in multiprocessing.get_all_start_methods()):
            return 1
        cores = os.sched_getaffinity(0) if hasattr(os, "sched_getaffinity") else range(os.cpu_count() or 1)
        workers = len(cores)
    return max(1, min(int(workers), chunks))


def process_pool(workers: int, method: str | None = None) -> concurrent.futures.ProcessPoolExecutor:
    """``workers`` processes: forked from this one where that is safe (they inherit its imports,
    layouts and elimination plans), else started afresh (they import ampplan first)."""
    method = _start_method() if method is None else method
    return concurrent.futures.ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context(method),
                                                  initializer=_ignore_interrupt)


def _start_method() -> str:
    """How :func:`process_pool` starts its workers: "fork" where that is safe, else afresh."""
    methods = multiprocessing.get_all_start_methods()
    return ("fork" if "fork" in methods and threading.active_count() == 1
            else "forkserver" if "forkserver" in methods else "spawn")


@dataclass(frozen=True)
class ToleranceSample:
    """One sample of a tolerance run, as :meth:`ToleranceResult.worst` lists them.

    Attributes
    ----------
    index : int
    passed : bool
    closeness : float
        The smallest margin of the sample relative to its median over the run (1: a typical
        sample, 0: at the edge, negative: past it; −inf when the sample did not solve).
    limiting : str
        The result address of that margin (``"s2.saturation_margin"`` …, or ``"status"``).
    parameters : dict of str -> float
        The sample's varied values (plan address -> value).
    """
    index: int
    passed: bool
    closeness: float
    limiting: str
    parameters: dict

    def to_dict(self) -> dict:
        return {"index": self.index, "passed": self.passed,
                "closeness": self.closeness if math.isfinite(self.closeness) else None,
                "limiting": self.limiting, "parameters": dict(self.parameters)}


@dataclass(frozen=True, eq=False)
class ToleranceResult:
    """A tolerance run: the samples, which of them pass, and what drives the margins.

    Attributes
    ----------
    parameters : dict of str -> ndarray of shape (S,)
        Every varied plan address -> its sampled values; sample i is re-solved by
        ``plan.set(address, parameters[address][i])`` for each address, then ``plan.solve()``.
    sweep : PlanSweep
        Every result address of every sample.
    passed : ndarray of bool, shape (S,)
        The rule of ``ampplan check`` exit 0 (status ok, every stage forward-active, no caution)
        and, when ``required_amplitude`` was given, ``max_source_amplitude >= required_amplitude``.
    seed : int
        The entropy the samples were drawn from (pass it as ``seed`` to draw them again).
    distribution, model : str
    required_amplitude : float or None
        Volts peak of source EMF.
    spreads : tuple of Spread
    """
    parameters: dict
    sweep: PlanSweep
    passed: np.ndarray
    seed: int
    distribution: str
    model: str
    required_amplitude: float | None
    spreads: tuple = field(repr=False)

    @property
    def samples(self) -> int:
        return len(self.passed)

    @property
    def yield_fraction(self) -> float:
        """Fraction of the samples that pass."""
        return float(np.mean(self.passed)) if self.samples else math.nan

    @property
    def margin_addresses(self) -> tuple:
        """The result addresses the statistics cover: each stage's margins and swing, the chain's amplitude."""
        return tuple(f"{sid}.{name}" for sid in self.sweep.plan.stage_ids
                     for name in ("saturation_margin", "cutoff_margin", "swing")) + ("max_source_amplitude",)

    @cached_property
    def percentiles(self) -> dict:
        """Result address -> {percentile: value} over the samples that solved (``PERCENTILES``)."""
        out = {}
        for address in self.margin_addresses:
            values = self.sweep[address]
            values = values[np.isfinite(values)]
            out[address] = {q: (float(np.percentile(values, q)) if values.size else math.nan) for q in PERCENTILES}
        return out

    @cached_property
    def _closeness(self) -> tuple:
        """(closeness, index of the limiting address) per sample (see :class:`ToleranceSample`)."""
        names = [a for a in self.margin_addresses if not a.endswith(".swing")]
        if self.required_amplitude is None:
            names.remove("max_source_amplitude")
        columns = []
        for address in names:
            values = np.asarray(self.sweep[address], dtype=float)
            if address == "max_source_amplitude":
                columns.append(values / self.required_amplitude - 1.0)
                continue
            finite = values[np.isfinite(values)]
            scale = float(np.median(np.abs(finite))) if finite.size else 0.0
            columns.append(values / scale if scale > 0 else np.where(values > 0, 1.0, np.where(values < 0, -1.0, 0.0)))
        matrix = np.column_stack(columns) if columns else np.zeros((self.samples, 0))
        filled = np.where(np.isnan(matrix), -np.inf, matrix)
        which = np.argmin(filled, axis=1) if columns else np.zeros(self.samples, dtype=int)
        closeness = filled[np.arange(self.samples), which] if columns else np.full(self.samples, np.inf)
        closeness = np.where(self.sweep.ok, closeness, -np.inf)
        return closeness, names, which

    def worst(self, n: int = 10) -> tuple:
        """The n samples nearest to failing (failed ones first), with their values.

        Samples are ordered by pass/fail, then by :attr:`ToleranceSample.closeness`.
        """
        if isinstance(n, bool) or not isinstance(n, numbers.Integral) or n < 0:
            raise InvalidValueError(f"ToleranceResult.worst: n must be a whole number >= 0, got {n!r}")
        closeness, names, which = self._closeness
        order = np.lexsort((closeness, self.passed))[:n]
        out = []
        for i in order.tolist():
            limiting = "status" if not self.sweep.ok[i] else (names[which[i]] if names else "")
            out.append(ToleranceSample(index=i, passed=bool(self.passed[i]), closeness=float(closeness[i]),
                                       limiting=limiting,
                                       parameters={a: float(v[i]) for a, v in self.parameters.items()}))
        return tuple(out)

    @cached_property
    def sensitivity(self) -> dict:
        """Result address -> ((plan address, rank correlation), ...), strongest first.

        Spearman's rank correlation of each varied value with each margin, over the samples that
        solved: the Pearson correlation of their ranks (``scipy.stats.rankdata``, ties averaged).
        A value that does not vary is left out, and so is a margin that does not vary beyond the
        model's resolution (:data:`.sweeps.RESOLUTION` of its largest magnitude): the ranks of
        rounding noise would be a correlation with nothing.
        """
        ok = self.sweep.ok
        if ok.sum() < 3:
            return {address: () for address in self.margin_addresses}
        varied = {a: v[ok] for a, v in self.parameters.items() if np.ptp(v[ok]) > 0}
        ranks = {a: _centred(stats.rankdata(v)) for a, v in varied.items()}
        by_subset = {}    # the values' ranks over the samples where a margin is finite, by those samples
        out = {}
        for address in self.margin_addresses:
            margin = np.asarray(self.sweep[address], dtype=float)[ok]
            finite = np.isfinite(margin)
            if (finite.sum() < 3
                    or np.ptp(margin[finite]) <= RESOLUTION[self.model] * np.max(np.abs(margin[finite]))):
                out[address] = ()
                continue
            if finite.all():
                m = _centred(stats.rankdata(margin))
                pairs = [(a, float(np.dot(r, m))) for a, r in ranks.items()]
            else:
                m = _centred(stats.rankdata(margin[finite]))
                key = finite.tobytes()
                if key not in by_subset:
                    by_subset[key] = {a: _centred(stats.rankdata(v[finite])) for a, v in varied.items()}
                pairs = [(a, float(np.dot(r, m))) for a, r in by_subset[key].items()]
            pairs = [(a, rho) for a, rho in pairs if math.isfinite(rho)]
            out[address] = tuple(sorted(pairs, key=lambda p: -abs(p[1])))
        return out

    def to_dict(self, samples: bool = False) -> dict:
        """Plain, JSON-ready summary (with every sample's values and results when ``samples``)."""
        def number(v):
            return v if v is not None and math.isfinite(v) else None
        out = {"model": self.model, "samples": self.samples, "seed": self.seed, "distribution": self.distribution,
               "required_amplitude": self.required_amplitude, "yield": self.yield_fraction,
               "passed": int(np.sum(self.passed)), "failed_to_solve": int(np.sum(~self.sweep.ok)),
               "spreads": {s.address: {"low": s.low, "high": s.high} for s in self.spreads},
               "percentiles": {a: {str(q): number(v) for q, v in p.items()} for a, p in self.percentiles.items()},
               "sensitivity": {a: [[p, rho] for p, rho in pairs[:5]] for a, pairs in self.sensitivity.items()},
               "worst": [s.to_dict() for s in self.worst(5)]}
        if samples:
            out["sweep"] = self.sweep.to_dict()
            out["passed_samples"] = self.passed.tolist()
        return out

    def __repr__(self) -> str:
        lines = [f"ToleranceResult({self.model}, {self.samples} samples, {self.distribution}, seed {self.seed}): "
                 f"yield {100 * self.yield_fraction:.2f} %"
                 + (f" (required amplitude {self.required_amplitude:g} V)" if self.required_amplitude else "")]
        for address, p in self.percentiles.items():
            lines.append(f"  {address}: " + ", ".join(f"p{q} {v:.4g}" for q, v in p.items()))
        for address, pairs in self.sensitivity.items():
            if pairs:
                lines.append(f"  {address} driven by " + ", ".join(f"{a} ({rho:+.2f})" for a, rho in pairs[:3]))
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        e = html.escape
        head = "".join(f"<th>p{q}</th>" for q in PERCENTILES)
        rows = "".join(f"<tr><td>{e(a)}</td>" + "".join(f"<td>{v:.4g}</td>" for v in p.values()) + "</tr>"
                       for a, p in self.percentiles.items())
        return (f"<div><strong>Tolerance run ({e(self.model)}, {self.samples} samples): yield "
                f"{100 * self.yield_fraction:.2f} %</strong><table><thead><tr><th>result</th>{head}</tr></thead>"
                f"<tbody>{rows}</tbody></table></div>")


def _centred(ranks: np.ndarray) -> np.ndarray:
    """Ranks centred and scaled to unit norm, so a dot product is their Pearson correlation."""
    centred = ranks - ranks.mean()
    norm = math.sqrt(float(np.dot(centred, centred)))
    return centred / norm if norm > 0 else np.full_like(centred, np.nan)


def _samples(value, name: str) -> int:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise InvalidValueError(f"tolerance {name}: must be a whole number >= 1, got {value!r}")
    return int(value)


def tolerance(plan, samples: int = 10_000, seed=None, resistors=0.05, beta=(0.5, 2.0), vbe_on=0.01,
              temperature=(0.0, 50.0), distribution: str = "uniform", required_amplitude=None,
              model: str = "constant-drop", executor=None, *, chunk_size: int = CHUNK,
              beta_temperature_coefficient: float = BETA_TEMPERATURE_COEFFICIENT, progress=None,
              workers: int | None = None) -> ToleranceResult:
    """Monte Carlo tolerance run of a plan (what is varied and how: see the module docstring).

    Parameters
    ----------
    plan : Plan
        Left unchanged.
    samples : int
    seed : int, optional
        Entropy of the run; None draws fresh entropy (reported as ``result.seed``).
    resistors : float or None
        Tolerance of every stage resistor as a fraction (0.05: ±5 %).
    beta : (float, float) or None
        Factor range of each stage transistor's β.
    vbe_on : float or None
        ± volts of each stage transistor's V_BE(on).
    temperature : (float, float) or None
        Ambient temperature range, °C (None: the plan's temperature).
    distribution : {"uniform", "normal"}
        ``"normal"`` treats each tolerance as 3σ.
    required_amplitude : float, optional
        Volts peak of source EMF that every passing sample must handle unclipped.
    model : {"constant-drop", "ebers-moll"}
    executor : concurrent.futures.Executor, optional
        Runs the chunks (a process pool, a cluster's executor); None lets the run choose
        (``workers``).
    chunk_size : int
        Samples per batched solve; the peak memory grows with it, not with ``samples``.
    beta_temperature_coefficient : float
        Fractional change of β per °C (see the module docstring).
    progress : callable, optional
        ``progress(done, total)`` after each chunk.
    workers : int, optional
        Without an executor: processes to run the chunks in; 1 runs them here in order, None
        chooses (:func:`worker_count`: one per core for runs of at least
        :data:`PARALLEL_SAMPLES` samples, where that is safe). The result is the same either way.

    Returns
    -------
    ToleranceResult

    Raises
    ------
    InvalidValueError, UnknownModelError
        Bad spreads, sample counts, seed, distribution, model or executor.
    """
    check_model(model)
    samples = _samples(samples, "samples")
    chunk_size = _samples(chunk_size, "chunk_size")
    if required_amplitude is not None and (isinstance(required_amplitude, bool)
                                           or not isinstance(required_amplitude, numbers.Real)
                                           or not 0 < required_amplitude < math.inf):
        raise InvalidValueError(f"tolerance required_amplitude: must be a positive number of volts, got "
                                f"{required_amplitude!r}")
    if seed is not None and (isinstance(seed, bool) or not isinstance(seed, numbers.Integral) or seed < 0):
        raise InvalidValueError(f"tolerance seed: must be a whole number >= 0 or None, got {seed!r}")
    if executor is not None and not callable(getattr(executor, "submit", None)):
        raise InvalidValueError(f"tolerance executor: must be a concurrent.futures.Executor, got {executor!r}")
    if progress is not None and not callable(progress):
        raise InvalidValueError(f"tolerance progress: must be callable as progress(done, total), got {progress!r}")
    if workers is not None:
        workers = _samples(workers, "workers")
    spreads = spreads_of(plan, model, resistors, beta, vbe_on, temperature, distribution, beta_temperature_coefficient)
    entropy = int(np.random.SeedSequence(seed).entropy)
    spec = ToleranceSpec(spreads=spreads, entropy=entropy, distribution=distribution, model=model,
                         beta_temperature_coefficient=float(beta_temperature_coefficient),
                         required_amplitude=None if required_amplitude is None else float(required_amplitude))
    frozen = plan.copy()
    pool = shared = None
    processes = 1 if executor is not None else worker_count(samples, chunk_size, workers)
    if processes > 1:
        # Plan the solves here first (one sample), so that every forked worker inherits them; the
        # sample's columns lay out the columns shared with forked workers.
        probe = run_chunk(frozen, spec, 0, 1)
        method = _start_method()
        if method == "fork":
            shared = share_columns(samples, probe)
        pool = executor = process_pool(processes - 1, method)      # this process runs chunks too
    try:
        parameters, table, passed = run_chunks(frozen, spec, samples, chunk_size, executor, progress, shared,
                                               workers=None if pool is None else processes - 1)
    except BaseException:
        if pool is not None:
            pool.shutdown(wait=False, cancel_futures=True)
        raise
    finally:
        unshare_columns(shared)
    if pool is not None:
        pool.shutdown()
    sweep = PlanSweep(values=parameters, model=model, plan=frozen, _table=table)
    return ToleranceResult(parameters=parameters, sweep=sweep, passed=passed, seed=entropy,
                           distribution=distribution, model=model, required_amplitude=spec.required_amplitude,
                           spreads=spreads)

