"""Soak: hours of simulated 48 kHz input through the engine, as fast as it goes.

Run:  .venv/bin/python bench/bench_soak.py [--hours 24] [--report-every-s 3600]

A synthetic bench oscillator (a stable 1234.5 Hz tone at -6 dBFS with white noise at
-66 dBFS, fresh noise for every block, phase kept exact across the whole run) is cut
into 0.1 s blocks and fed to `monitor.engine.Engine` with keep_readings=False; an
on_reading callback keeps running statistics per simulated hour. Printed:

1. throughput in x real time, of the engine alone and of generator + engine;
2. resident memory at the start, at every report point and at the end, and its growth
   (per simulated hour, so a short run says what a day would cost);
3. the frequency read in the first and in the last hour, each against the generator's
   frequency and against each other, within their uncertainties;
4. dropped blocks: every gate must arrive, contiguous, one gate after the other.

Exit code 0 when the readings are unchanged and nothing was dropped, 1 otherwise.
Memory growth is reported, not judged (it depends on the platform's allocator).
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
from fractions import Fraction
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from monitor.blocks import Block, StreamMeta  # noqa: E402
from monitor.engine import AnalysisSettings, Engine  # noqa: E402

FS_HZ = 48000
TONE_HZ = Fraction(2469, 2)  # 1234.5 Hz, exact
AMP = 0.5
NOISE_RMS = 0.5e-3  # -66 dBFS: a gate SNR far above the counter's threshold
BLOCK_FRAMES = 4800


def rss_bytes() -> tuple[int, str]:
    """(resident set size, how it was measured): current RSS where the platform tells
    it, else the peak."""
    try:
        with open("/proc/self/statm") as f:
            return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE"), "current"
    except (OSError, ValueError, AttributeError):
        pass
    if sys.platform == "win32":
        import ctypes
        from ctypes import wintypes

        class Counters(ctypes.Structure):
            _fields_ = [
                ("cb", wintypes.DWORD),
                ("PageFaultCount", wintypes.DWORD),
                ("PeakWorkingSetSize", ctypes.c_size_t),
                ("WorkingSetSize", ctypes.c_size_t),
                ("QuotaPeakPagedPoolUsage", ctypes.c_size_t),
                ("QuotaPagedPoolUsage", ctypes.c_size_t),
                ("QuotaPeakNonPagedPoolUsage", ctypes.c_size_t),
                ("QuotaNonPagedPoolUsage", ctypes.c_size_t),
                ("PagefileUsage", ctypes.c_size_t),
                ("PeakPagefileUsage", ctypes.c_size_t),
            ]

        c = Counters()
        c.cb = ctypes.sizeof(c)
        ctypes.windll.psapi.GetProcessMemoryInfo(
            ctypes.windll.kernel32.GetCurrentProcess(), ctypes.byref(c), c.cb
        )
        return int(c.WorkingSetSize), "current"
    import resource

    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return int(peak if sys.platform == "darwin" else peak * 1024), "peak"


class ToneGenerator:
    """Blocks of a tone whose phase is exact at any sample index (rational arithmetic),
    plus fresh Gaussian noise, so hour 24 is made exactly as hour 1."""

    def __init__(self, fs_hz: int, tone_hz: Fraction, amp: float, noise_rms: float, seed: int):
        self.fs = fs_hz
        self.tone = tone_hz
        self.amp = amp
        self.noise = noise_rms
        self.rng = np.random.default_rng(seed)

    def block(self, start: int, n: int) -> np.ndarray:
        cycles = (self.tone * start / self.fs) % 1  # exact phase of the first sample
        k = np.arange(n)
        phase = 2 * np.pi * (float(cycles) + float(self.tone / self.fs) * k)
        return self.amp * np.sin(phase) + self.noise * self.rng.standard_normal(n)


class HourStats:
    """Welford mean and variance of the readings of one simulated hour."""

    def __init__(self):
        self.n = 0
        self.mean = 0.0
        self.m2 = 0.0
        self.u2_sum = 0.0
        self.no_tone = 0

    def add(self, f: float | None, u: float | None) -> None:
        if f is None:
            self.no_tone += 1
            return
        self.n += 1
        d = f - self.mean
        self.mean += d / self.n
        self.m2 += d * (f - self.mean)
        self.u2_sum += (u or 0.0) ** 2

    @property
    def std(self) -> float:
        return math.sqrt(self.m2 / (self.n - 1)) if self.n > 1 else math.nan

    @property
    def sem(self) -> float:
        """Standard error of the hour's mean frequency."""
        return self.std / math.sqrt(self.n) if self.n > 1 else math.nan

    @property
    def u_rms(self) -> float:
        return math.sqrt(self.u2_sum / self.n) if self.n else math.nan


class Watcher:
    """on_reading: per-hour statistics and the checks for dropped or out-of-order gates."""

    def __init__(self, gate_s: float, hour_s: float):
        self.gate_s = gate_s
        self.hour_s = hour_s
        self.hours: dict[int, HourStats] = {}
        self.count = 0
        self.next_t = 0.0
        self.gaps = 0
        self.not_contiguous = 0
        self.overflow = 0

    def __call__(self, r) -> None:
        if abs(r.t_s - self.next_t) > 0.5 / FS_HZ:
            self.gaps += 1
        self.next_t = r.t_s + r.gate_s
        self.count += 1
        self.not_contiguous += self.count > 1 and not r.contiguous
        self.overflow += bool(r.overflow)
        hour = int(r.t_s // self.hour_s)
        self.hours.setdefault(hour, HourStats()).add(r.frequency_hz, r.uncertainty_hz)


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--hours", type=float, default=24.0, help="simulated hours (default 24)")
    p.add_argument("--gate", type=float, default=1.0, help="gate time, s (default 1.0)")
    p.add_argument(
        "--report-every-s",
        type=float,
        default=3600.0,
        help="simulated seconds between memory reports (default 3600: every hour)",
    )
    p.add_argument("--seed", type=int, default=20261201, help="noise seed")
    # bench/run.py calls main() with its own command line in sys.argv: defaults then
    if argv is None:
        argv = sys.argv[1:] if __name__ == "__main__" else []
    args = p.parse_args(argv)
    if not args.hours > 0:
        p.error(f"--hours {args.hours} must be positive")

    total = int(round(args.hours * 3600 * FS_HZ))
    hour_s = min(3600.0, args.hours * 3600 / 2)  # a short run still has two "hours"
    meta = StreamMeta(source="<soak generator>", fs_hz=float(FS_HZ), mode="audio")
    watch = Watcher(args.gate, hour_s)
    engine = Engine(
        meta,
        AnalysisSettings(mode="audio", gate_s=args.gate),
        keep_readings=False,
        on_reading=watch,
    )
    gen = ToneGenerator(FS_HZ, TONE_HZ, AMP, NOISE_RMS, args.seed)

    print(
        f"soak: {args.hours:g} h at {FS_HZ} Hz ({total:,} samples), {args.gate:g} s gates, "
        f"{BLOCK_FRAMES}-frame blocks, tone {float(TONE_HZ)} Hz"
    )
    rss0, how = rss_bytes()
    print(f"RSS at start: {rss0 / 2**20:.1f} MiB ({how})")
    print(f"{'sim time':>10} {'RSS MiB':>9} {'growth MiB':>11} {'readings':>9} {'x real':>8}")
    report_every = int(round(args.report_every_s * FS_HZ))
    next_report = report_every
    t_engine = 0.0
    t0 = time.perf_counter()
    fed = 0
    rss_points = [(0.0, rss0)]
    while fed < total:
        n = min(BLOCK_FRAMES, total - fed)
        x = gen.block(fed, n)
        ta = time.perf_counter()
        engine.feed(Block(x, fed, meta))
        t_engine += time.perf_counter() - ta
        fed += n
        if fed >= next_report or fed == total:
            if fed == total:
                ta = time.perf_counter()
                engine.finish()
                t_engine += time.perf_counter() - ta
            rss, _ = rss_bytes()
            sim = fed / FS_HZ
            rss_points.append((sim, rss))
            wall = time.perf_counter() - t0
            print(
                f"{sim / 3600:9.2f}h {rss / 2**20:9.1f} {(rss - rss0) / 2**20:+11.1f} "
                f"{watch.count:9d} {sim / wall:7.0f}x",
                flush=True,
            )
            next_report += report_every
    wall = time.perf_counter() - t0
    sim = total / FS_HZ
    t_sum = time.perf_counter()
    summary = engine.summary()
    t_sum = time.perf_counter() - t_sum
    rss1, _ = rss_bytes()

    print(
        f"\nthroughput: engine {sim / t_engine:.0f}x real time, with generator "
        f"{sim / wall:.0f}x ({wall:.1f} s for {sim / 3600:g} h); summary {t_sum:.2f} s"
    )
    growth = rss1 - rss0
    # growth after the first report point: start-up (first gate, imports) excluded
    if len(rss_points) > 2:
        (sa, ra), (sb, rb) = rss_points[1], rss_points[-1]
        per_h = (rb - ra) / 2**20 / max((sb - sa) / 3600, 1e-9)
        rate = f", {per_h:+.2f} MiB per simulated hour after the first report"
    else:
        rate = ""
    print(
        f"RSS: start {rss0 / 2**20:.1f} MiB, end {rss1 / 2**20:.1f} MiB, "
        f"growth {growth / 2**20:+.1f} MiB{rate}"
    )

    expected = total // engine.gate_n + (1 if total % engine.gate_n >= engine.gate_n // 2 else 0)
    dropped_ok = (
        watch.count == expected
        and watch.gaps == 0
        and watch.not_contiguous == 0
        and watch.overflow == 0
        and engine.frames == total
    )
    print(
        f"readings: {watch.count} of {expected} expected; gaps {watch.gaps}, not contiguous "
        f"{watch.not_contiguous}, overflow {watch.overflow}; frames {engine.frames:,} of "
        f"{total:,} -> {'no dropped blocks' if dropped_ok else 'DROPPED INPUT'}"
    )

    hours = sorted(watch.hours)
    first, last = watch.hours[hours[0]], watch.hours[hours[-1]]
    f0 = float(TONE_HZ)
    ok = dropped_ok
    for label, h in (("first", first), ("last", last)):
        z = (h.mean - f0) / h.sem if h.sem > 0 else math.inf
        print(
            f"{label} hour: {h.n} readings, mean {h.mean:.9f} Hz, std {h.std:.3e} Hz, "
            f"standard error {h.sem:.2e} Hz, stated u (rms) {h.u_rms:.2e} Hz, "
            f"vs generator {h.mean - f0:+.2e} Hz ({z:+.1f} se); {h.no_tone} without a tone"
        )
        ok &= abs(z) <= 4.0 and h.no_tone == 0
    both = math.hypot(first.sem, last.sem)
    z = (last.mean - first.mean) / both
    print(
        f"last - first hour: {last.mean - first.mean:+.2e} Hz ({z:+.1f} combined se) -> "
        f"{'unchanged' if abs(z) <= 4 else 'CHANGED'}"
    )
    ok &= abs(z) <= 4.0
    st = summary.tone
    dev = st.frequency_hz - f0
    print(
        f"whole run: {st.frequency_hz:.10f} Hz +- {st.uncertainty_hz:.1e} Hz ({st.method}, "
        f"{st.n_gates} gates, Birge ratio {st.birge_ratio:.2f}); vs generator {dev:+.1e} Hz "
        f"({dev / st.uncertainty_hz:+.1f} u) - reported, not judged: the combination is "
        "the engine's"
    )
    if summary.warnings:
        print("summary warnings: " + "; ".join(summary.warnings))
    print("soak: " + ("PASS" if ok else "FAIL"))
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
