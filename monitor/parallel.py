"""One long recording analysed on several cores: the same engine, run on parts of it.

A recording is cut on gate boundaries into parts (a few per worker process, each a whole
number of gates, the last one taking the rest). A worker opens the file, reads a part
and runs an `Engine` on it; the parent joins the engines in order
(`Engine.absorb`), so the readings, their summaries and the phase-coherent join of the
whole record are those of one engine that read the file from start to end:

- gate boundaries fall on the same samples (every part starts on one);
- a measurement filter is brought to its state at the part's start by running it over
  the `PREROLL_S` seconds before it (the filters' slowest poles decay in tens of
  milliseconds, so the state agrees with the one-pass state to rounding);
- the spur search and the choice of the mains family run on the same gates (they
  follow the gate index, and parts start on such a gate);
- the counter's tracking state at a part's start comes from the gate before it (a fresh
  search there, then tracking as in one pass), so the part's first fit starts next to
  where one pass's starts and stops at the same point to second order in the fit's
  tolerance. The parent measures that first gate as one pass would (from the joined
  parts' tracking state): if it finds another line (a tone that faded under a stronger
  one), the part is run again in the parent, continuing the parts before it.

The FM modes (beat, iq) are split the same way: the first gate chooses the carrier, the
IF bandwidth and the filters for all parts (`FmProcessor.first_setup`); a part's
demodulator and post-demodulation filters are run over what comes before it until they
hold one pass's state to rounding, and its running sums (the carrier's phase join,
deviation statistics and histogram, BS.412 windows on the output clock, the averaged
spectrum, the quality and I/Q statistics) are joined in order. The modulating tone the
part follows into its first gate is measured on the gate before it; when it is not the
tone one pass follows there, the parent runs that part itself.

Audio mode splits integer PCM files (WAV, RF64, W64 and the other containers whose
integer reads were checked, see `monitor.sources`) without a deviation calibration; the
FM modes split those and 32/64-bit float files too (a part holding NaN or inf samples
sends the whole recording through one pass, which handles them). Everything else, and
recordings too short for the start-up cost to pay, takes one process.

Workers start by `fork` on Linux (a few milliseconds) when no other thread is running,
else from a fork server, and by `spawn` on macOS and Windows; those two take about a
second to start, so recordings are split there only from half an hour up.
"""

from __future__ import annotations

import itertools
import math
import multiprocessing
import os
import signal
import sys
import threading
import warnings
from collections.abc import Callable

from monitor.blocks import Block
from monitor.engine import SFDR_EVERY_GATES, Analysis, AnalysisSettings, Engine, _gate_n

#: seconds before a part run through the measurement filter to settle it
PREROLL_S = 2.0
#: fewest gates a part must hold for a split to be worth it
MIN_PART_GATES = 60
#: the FM modes split from twice this many gates (their gates cost several times an
#: audio gate: a split pays from about 90 one-second gates, the workers' start and the
#: join taking some 60 ms)
MIN_FM_PART_GATES = 45
#: with workers started by spawn or a fork server, the shortest recording split (s)
MIN_SPAWN_SECONDS = 1800.0
#: most worker processes
MAX_JOBS = 8
#: parts per worker: the pool hands the next part to whichever worker is free, so a core
#: that another program slows holds up a small part, not half the record (and the
#: progress bar moves more often)
PARTS_PER_JOB = 4


def cpu_count() -> int:
    """CPUs this process may use (affinity-aware where the platform tells)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def _context():
    """The start method for workers.

    fork on Linux (a few milliseconds; the children use nothing the parent's other
    threads could hold), unless the process already runs other threads (a progress bar):
    then forkserver, whose server has imported the engine once. macOS and Windows spawn.
    """
    if sys.platform.startswith("linux"):
        if threading.active_count() == 1:
            return multiprocessing.get_context("fork")
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(["monitor.parallel"])
        return ctx
    return multiprocessing.get_context("spawn")


def _quick_start() -> bool:
    return _context().get_start_method() == "fork"


def _worker_init() -> None:
    # Ctrl-C is the parent's to handle: it stops the pool and says so in one line
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def why_not_split(source, settings: AnalysisSettings) -> str | None:
    """Why `source` cannot be analysed in parts (None when it can)."""
    from monitor.sources import SoundFileSource

    if settings.mode in ("beat", "iq"):
        if not isinstance(source, SoundFileSource):
            return "only WAV, RF64, W64 and other libsndfile recordings are read in parts"
        return None
    if settings.mode != "audio":
        return f"{settings.mode} mode cannot be analysed in parts"
    if settings.deviation_hz_per_unit:
        return "audio deviation figures are kept from gate to gate"
    if not isinstance(source, SoundFileSource) or not source.integer_samples:
        return "only integer PCM files are read in parts"
    return None


def plan_parts(
    frames: int, gate_n: int, jobs: int, *, align: int = SFDR_EVERY_GATES, multiple: int = 1
) -> list[tuple[int, int]]:
    """[(start, stop)] frames of up to `jobs` parts of whole gates (the last part
    takes the rest, partial gate included); one part when they would be shorter than
    MIN_PART_GATES.

    Parts start on multiples of `align` gates: the quality meter's full gates (spur
    search, both mains families) fall every SFDR_EVERY_GATES gates, so each part starts
    on one, as the gate would in a one-pass analysis. With `multiple` > 1 (the number
    of workers) the count of parts is a multiple of it where there are enough gates, so
    the workers get equal shares."""
    gates = frames // gate_n
    jobs = max(1, min(jobs, gates // MIN_PART_GATES))
    if multiple > 1 and jobs > multiple:
        jobs -= jobs % multiple
    if jobs == 1:
        return [(0, frames)]
    starts = sorted({round(k * gates / jobs / align) * align * gate_n for k in range(jobs)})
    return list(itertools.pairwise([*starts, frames]))


def plan_guided_parts(frames: int, gate_n: int, workers: int) -> list[tuple[int, int]]:
    """[(start, stop)] frames of parts that shrink towards the end (each about the rest
    over one more than the workers, none under two spur-search periods, starts on
    multiples of SFDR_EVERY_GATES; the last part takes the partial gate): the workers get
    large parts first and finish together on small ones, whatever one of them was slowed
    by. (Each part costs a run-in of about two gates and 15 ms of start: for 10 minutes of
    1 s gates on 2 workers the parts are 200, 136, 88, 64, 40, 24, 16, 16 and 16 gates,
    which measured 3-4% quicker than the eleven parts of the rest over twice the
    workers.) One part when the record holds fewer than two of MIN_FM_PART_GATES."""
    gates = frames // gate_n
    if workers < 2 or gates < 2 * MIN_FM_PART_GATES:
        return [(0, frames)]
    align = SFDR_EVERY_GATES
    tail = 2 * align
    starts = [0]
    while True:
        rest = gates - starts[-1]
        size = max(tail, -(-rest // (workers + 1)))
        size = -(-size // align) * align
        if rest - size < tail:
            break
        starts.append(starts[-1] + size)
    return list(itertools.pairwise([s * gate_n for s in starts] + [frames]))


def choose_jobs(jobs: int | None, source, settings: AnalysisSettings) -> int:
    """How many processes to use: `jobs` (None: as many as pay off, up to the CPUs)."""
    if jobs is not None and jobs < 1:
        raise ValueError(f"jobs={jobs} must be at least 1")
    if jobs == 1 or why_not_split(source, settings) is not None:
        return 1
    if jobs is None:
        seconds = source.meta.frames / source.meta.fs_hz
        if not _quick_start() and seconds < MIN_SPAWN_SECONDS:
            return 1
        jobs = min(cpu_count(), MAX_JOBS)
    return jobs


def plan_for(frames: int, gate_n: int, jobs: int, settings: AnalysisSettings):
    """The parts a recording in `settings`' mode is cut into for `jobs` workers: in the
    FM modes shrinking towards the end (`plan_guided_parts`), in audio mode a few equal
    ones a worker (`plan_parts`)."""
    if settings.mode in ("beat", "iq"):
        return plan_guided_parts(frames, gate_n, jobs)
    return plan_parts(frames, gate_n, jobs * PARTS_PER_JOB, multiple=jobs)


def _part(task) -> tuple[Engine | None, list[tuple[str, type]]]:
    """Worker: run one engine on frames [start, stop) of the file (None when the part
    holds samples only a whole read can handle)."""
    path, source_kw, settings, start, stop, gate_index, shared = task
    from monitor.sources import NonFiniteSamples, open_source

    with warnings.catch_warnings(record=True) as said:
        warnings.simplefilter("always")
        with open_source(path, **source_kw) as src:
            src.prefer_block_frames(_gate_n(settings, src.meta))
            engine = Engine(src.meta, settings)
            p = engine.processor
            try:
                if settings.mode in ("beat", "iq"):
                    if start > 0:
                        p.prepare_part(src, start, engine.gate_n, gate_index, shared)
                    else:
                        p.use_setup(shared)
                else:
                    _prepare_audio_part(p, src, start, engine.gate_n, gate_index, shared)
                engine._next = start
                src.reuse_buffers = engine.holds_no_samples()
                for block in src.blocks_between(start, stop):
                    engine.feed(block)
                engine.finish()
            except NonFiniteSamples:
                return None, []
    engine.drop_buffer()  # the parent needs the figures, not the last gate's samples
    # warnings are handed to the parent, which shows them (once each): a worker writes
    # nothing
    seen: dict[tuple[str, type], None] = {}
    for w in said:
        seen.setdefault((str(w.message), w.category))
    return engine, list(seen)


def _prepare_audio_part(p, src, start: int, gate_n: int, gate_index: int, sos) -> None:
    p.start_at(gate_index)
    if sos is not None:
        # the parent's design, not one of our own: a least-squares polish can land on
        # slightly different coefficients in another process
        p._sos = sos
    if start > 0:
        if p._sos is not None:
            pre = max(0, start - int(math.ceil(PREROLL_S * src.meta.fs_hz)))
            for block in src.blocks_between(pre, start):
                p.filtered(block.samples)
        p.warm_up(src.samples_between(start - gate_n, start))


def _joins(engine: Engine, part: Engine, source, start: int) -> bool:
    """Whether `part` (which started afresh at `start`) continues `engine` as one pass
    would: the first gate of a part searches the spectrum for the tone, where one pass
    follows the tone of the gate before. Both give the same line unless the tone moved
    or faded (or another line is stronger); the parent checks that gate itself. (The FM
    processor answers for itself: `FmProcessor.joins`.)"""
    p = engine.processor
    joins = getattr(p, "joins", None)
    if joins is not None:
        return joins(part.processor)
    if p._track_hz is None or not part.readings:
        return True  # one pass searches afresh here too
    from monitor.engine import TONE_GATE_SNR_MIN_DB

    x = source.samples_between(start, start + engine.gate_n)
    if x.shape[0] < engine.gate_n:
        return False
    est = p._tone(x)
    k = engine.meta.clock_factor
    one_pass = est.frequency_hz * k if est.gate_snr_db >= TONE_GATE_SNR_MIN_DB else None
    first = part.readings[0].frequency_hz
    if one_pass is None or first is None:
        return one_pass is None and first is None
    bin_hz = engine.meta.fs_hz / engine.gate_n * k
    return abs(one_pass - first) <= 1e-3 * bin_hz  # the same line, to the fit's tolerance


def _continue(engine: Engine, source, start: int, stop: int, last: bool) -> None:
    """Run frames [start, stop) through `engine` itself (exactly as one pass does)."""
    engine.restore_buffer()
    for block in source.blocks_between(start, stop):
        engine.feed(block)
    if last:
        engine.finish()


def analyze_parts(
    path,
    source,
    settings: AnalysisSettings,
    source_kw: dict,
    jobs: int,
    *,
    progress: Callable[[int, int | None], None] | None = None,
) -> Analysis:
    """Analyse `source` (opened from `path` with `source_kw`) in `jobs` processes.

    A part whose first gate the one-pass engine would have measured differently (see
    `_joins`) is run again in this process, continuing the parts before it. A worker that
    dies (out of memory, say) makes the whole record run in this process, with a warning.
    """
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    from monitor.engine import run
    from monitor.sources import NonFiniteSamples

    meta = source.meta
    gate_n = _gate_n(settings, meta)
    parts = plan_for(meta.frames, gate_n, jobs, settings)
    warm = Engine(meta, settings, keep_readings=False)
    try:
        first = source.samples_between(0, gate_n)
    except NonFiniteSamples:
        return run(source, settings, progress=progress)
    if settings.mode in ("beat", "iq"):
        # The first gate chooses the carrier, bandwidth and filters every part uses, as
        # one pass's first gate does; building them here makes the filter designs and
        # lazy imports once, for the forked workers to inherit.
        shared = warm.processor.first_setup(first)
        warm.processor.configure(shared)
    else:
        # One gate through a throwaway engine: the lazy imports (scipy's FFT and
        # filters) and the per-length tables are then made once here and inherited by
        # forked workers, instead of once in every worker.
        warm.feed(Block(first, 0, meta))
        shared = None
        if settings.filter != "none":
            from dsp import filters

            shared = filters.filter_sos(settings.filter, meta.fs_hz)  # the one-pass engine's
    tasks = [(str(path), source_kw, settings, a, b, a // gate_n, shared) for a, b in parts]
    engine: Engine | None = None
    whole = False
    done = 0
    try:
        with ProcessPoolExecutor(
            min(jobs, len(parts)), mp_context=_context(), initializer=_worker_init
        ) as pool:
            try:
                for (a, b), (part, said) in zip(parts, pool.map(_part, tasks), strict=True):
                    if part is None:
                        raise NonFiniteSamples
                    for text, category in said:
                        warnings.warn(text, category, stacklevel=2)
                    if engine is None:
                        engine = part
                        engine.restore_buffer()
                    elif _joins(engine, part, source, a):
                        engine.absorb(part)
                    else:
                        _continue(engine, source, a, b, last=b == meta.frames)
                    done = b
                    if progress is not None:
                        progress(done, meta.frames)
            except NonFiniteSamples:
                whole = True  # NaN or inf samples: only a whole read handles them
                pool.shutdown(wait=False, cancel_futures=True)
    except BrokenProcessPool:
        warnings.warn(
            "a worker process died (out of memory?): the recording was analysed in one "
            "process instead",
            RuntimeWarning,
            stacklevel=2,
        )
        return run(source, settings, progress=progress)
    if whole:
        return run(source, settings, progress=progress)
    if engine.frames < meta.frames:
        source._warn(
            f"file is truncated: header promises {meta.frames} frames, found {engine.frames}"
        )
    summary = engine.summary(extra_warnings=source.warnings)
    return Analysis(meta, engine.readings, summary, engine.extra())
