"""Two checkouts of swingmeter timed against each other on one FM recording, in turn.

Run:  .venv/bin/python bench/ab_fm.py OTHER_CHECKOUT [--mode beat|iq] [--seconds S]
                                      [--jobs N] [--rounds R]

The machines here change speed by up to 1.8x from minute to minute, so two figures
measured apart say little about a change of a few per cent. This script alternates the
two checkouts (this one and OTHER_CHECKOUT, e.g. `git worktree add /tmp/old HEAD~1`),
each round in fresh processes, and prints each round's ratio and their median: the
rounds share the machine's mood, the ratio does not. The recording is the benchmark's
own (bench_analyze_fm: single-tone FM at 30 dB C/N), written once to a temporary
directory.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from bench.bench_analyze_fm import CASES, make  # noqa: E402

_TIMER = """
import sys, time
sys.path.insert(0, sys.argv[1])
from monitor.engine import AnalysisSettings, analyze_file
from monitor.fm_engine import FmSettings
mode, path, bw = sys.argv[2], sys.argv[3], float(sys.argv[4])
jobs = None if sys.argv[5] == "all" else int(sys.argv[5])
s = AnalysisSettings(mode=mode, fm=FmSettings(if_bandwidth_hz=bw))
analyze_file(path, settings=s, jobs=jobs)
best = float("inf")
for _ in range(2):
    t0 = time.perf_counter()
    analyze_file(path, settings=s, jobs=jobs)
    best = min(best, time.perf_counter() - t0)
print(best)
"""


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("other", type=Path, help="the other checkout's root directory")
    ap.add_argument("--mode", choices=("beat", "iq"), default="beat")
    ap.add_argument("--seconds", type=float, default=600.0, help="record length (600)")
    ap.add_argument("--jobs", default="all", help="processes: a number or 'all' (all)")
    ap.add_argument("--rounds", type=int, default=6, help="rounds of the two (6)")
    args = ap.parse_args(argv)
    if not (args.other / "monitor" / "engine.py").is_file():
        ap.error(f"{args.other} is not a swingmeter checkout (no monitor/engine.py)")
    if args.rounds < 1:
        ap.error("--rounds must be at least 1")
    kind = "real" if args.mode == "beat" else "complex"
    _, fs, _, carrier, dev, tone, bw, _ = next(c for c in CASES if c[2] == kind)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"{args.mode}.wav"
        print(f"writing {args.seconds:g} s of {args.mode} FM ...", flush=True)
        make(path, fs, kind, carrier, dev, tone, bw, args.seconds)
        roots = {"this": ROOT, "other": args.other.resolve()}
        xrt: dict[str, list[float]] = {k: [] for k in roots}
        for r in range(args.rounds):
            for name, root in roots.items():
                out = subprocess.run(
                    [sys.executable, "-c", _TIMER, str(root), args.mode, str(path), str(bw),
                     str(args.jobs)],
                    capture_output=True, text=True, check=True,
                )  # fmt: skip
                xrt[name].append(args.seconds / float(out.stdout.strip()))
            print(
                f"round {r + 1}: this {xrt['this'][-1]:.0f}x, other {xrt['other'][-1]:.0f}x, "
                f"ratio {xrt['this'][-1] / xrt['other'][-1]:.3f}",
                flush=True,
            )
    ratios = [a / b for a, b in zip(xrt["this"], xrt["other"], strict=True)]
    print(
        f"median: this {statistics.median(xrt['this']):.0f}x, other "
        f"{statistics.median(xrt['other']):.0f}x, ratio {statistics.median(ratios):.3f} "
        f"(range {min(ratios):.3f}-{max(ratios):.3f})"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
