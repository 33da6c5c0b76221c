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
- the counter's first gate in a part starts from a fresh search instead of the last
  frequency of the part before: the fit converges to the same minimum (the readings
  agree to rounding).

Only integer PCM files (WAV/RF64/W64 through libsndfile) in audio mode without a
deviation calibration are split; everything else, and recordings too short for the
start-up cost to pay, takes one process. Workers start by `fork` on Linux (a few
milliseconds) and by `spawn` elsewhere (about a second: only recordings of half an hour
or more are split there).
"""

from __future__ import annotations

import itertools
import math
import multiprocessing
import os
import sys
import warnings
from collections.abc import Callable

from monitor.engine import SFDR_EVERY_GATES, Analysis, AnalysisSettings, Engine, _gate_n

#: seconds before a part run through the measurement filter to settle it
PREROLL_S = 2.0
#: fewest gates a part must hold for a split to be worth it
MIN_PART_GATES = 60
#: with workers started by spawn, the shortest recording that is split (s)
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
    # fork is quick and safe on Linux; macOS and Windows need spawn
    method = "fork" if sys.platform.startswith("linux") else "spawn"
    return multiprocessing.get_context(method)


def why_not_split(source, settings: AnalysisSettings) -> str | None:
    """Why `source` cannot be analysed in parts (None when it can)."""
    from monitor.sources import SoundFileSource

    if settings.mode != "audio":
        return f"{settings.mode} mode keeps its demodulator state from gate to gate"
    if settings.deviation_hz_per_unit:
        return "audio deviation figures are kept from gate to gate"
    if not isinstance(source, SoundFileSource) or not source.integer_samples:
        return "only integer PCM files are read in parts"
    return None


def plan_parts(
    frames: int, gate_n: int, jobs: int, *, align: int = SFDR_EVERY_GATES
) -> list[tuple[int, int]]:
    """[(start, stop)] frames of up to `jobs` parts of whole gates (the last part
    takes the rest, partial gate included); one part when they would be too short.

    Parts start on multiples of `align` gates: the quality meter's full gates (spur
    search, both mains families) fall every SFDR_EVERY_GATES gates, so each part starts
    on one, as the gate would in a one-pass analysis."""
    gates = frames // gate_n
    jobs = max(1, min(jobs, gates // MIN_PART_GATES))
    if jobs == 1:
        return [(0, frames)]
    starts = sorted({round(k * gates / jobs / align) * align * gate_n for k in range(jobs)})
    return list(itertools.pairwise([*starts, frames]))


def choose_jobs(jobs: int | None, source, settings: AnalysisSettings) -> int:
    """How many processes to use: `jobs` (None: as many as pay off, up to the CPUs)."""
    if jobs is not None and jobs < 1:
        raise ValueError(f"jobs={jobs} must be at least 1")
    if jobs == 1 or why_not_split(source, settings) is not None:
        return 1
    if jobs is None:
        seconds = source.meta.frames / source.meta.fs_hz
        if _context().get_start_method() != "fork" and seconds < MIN_SPAWN_SECONDS:
            return 1
        jobs = min(cpu_count(), MAX_JOBS)
    return jobs


def _part(task) -> tuple[Engine, list[tuple[str, type]]]:
    """Worker: run one engine on frames [start, stop) of the file."""
    path, source_kw, settings, start, stop, gate_index = task
    from monitor.sources import open_source

    with warnings.catch_warnings(record=True) as said:
        warnings.simplefilter("always")
        with open_source(path, **source_kw) as src:
            engine = Engine(src.meta, settings)
            p = engine.processor
            p.start_at(gate_index)
            if p._sos is not None and start > 0:
                pre = max(0, start - int(math.ceil(PREROLL_S * src.meta.fs_hz)))
                for block in src.blocks_between(pre, start):
                    p.filtered(block.samples)
            engine._next = start
            for block in src.blocks_between(start, stop):
                engine.feed(block)
            engine.finish()
    # warnings are handed to the parent, which shows them: a worker writes nothing
    return engine, [(str(w.message), w.category) for w in said]


def analyze_parts(
    path,
    source,
    settings: AnalysisSettings,
    source_kw: dict,
    jobs: int,
    *,
    progress: Callable[[int, int | None], None] | None = None,
) -> Analysis:
    """Analyse `source` (opened from `path` with `source_kw`) in `jobs` processes."""
    meta = source.meta
    gate_n = _gate_n(settings, meta)
    parts = plan_parts(meta.frames, gate_n, jobs * PARTS_PER_JOB)
    tasks = [(str(path), source_kw, settings, a, b, a // gate_n) for a, b in parts]
    engine: Engine | None = None
    done = 0
    with _context().Pool(min(jobs, len(parts))) as pool:
        for part, said in pool.imap(_part, tasks):
            for text, category in said:
                warnings.warn(text, category, stacklevel=2)
            if engine is None:
                engine = part
            else:
                engine.absorb(part)
            done += part.frames
            if progress is not None:
                progress(done, meta.frames)
    if engine.frames < meta.frames:
        source._warn(
            f"file is truncated: header promises {meta.frames} frames, found {engine.frames}"
        )
    summary = engine.summary(extra_warnings=source.warnings)
    return Analysis(meta, engine.readings, summary, engine.extra())
