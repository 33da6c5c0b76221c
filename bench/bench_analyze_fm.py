"""FM analysis through the whole engine: throughput, deviation error and memory, beside a
naive notebook baseline measured in the same run.

Run:  .venv/bin/python bench/bench_analyze_fm.py [--beat-seconds S] [--iq-seconds S]
                                                  [--repeat N]

Cases: a 48 kHz beat note and a 192 kHz I/Q recording (32-bit float WAV), single-tone FM
(1 kHz tone, 3 kHz and 5 kHz deviation) at 30 dB carrier-to-noise in the IF bandwidth.
Contenders, timed in turn in one process (a warm-up run each, then the best of --repeat
runs):

- "swingmeter": `analyze_file` as `swingmeter analyze` runs it (every reading and the
  summary; long recordings in parts on all CPUs, monitor.parallel);
- "--jobs 1": the same in one process;
- "naive": whole-file scipy.signal.hilbert, unwrap, diff, per-second max/min.

"x naive" is a contender's speed over the naive baseline's in the same run. The baseline's
own work never changes, so its speed also shows how fast the machine ran that minute: on a
shared machine the same code runs up to twice as fast on one minute as on another, and
x real time moves with it while x naive changes far less.

Throughput is measured on long records (10 minutes of beat note, 3 minutes of I/Q by
default), where the per-file start-up (acquisition, the workers' start, the summary) is
spread thin; a 60-second record is timed too and shown with it. Peak memory of one
`analyze_file` call is measured in a fresh process for the 60-second and the long record
(bounded memory: the two agree). Targets: >= 500x real time at 48 kHz beat, >= 100x at
192 kHz I/Q, deviation error <= 0.5%.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import soundfile as sf

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from monitor.engine import AnalysisSettings, analyze_file  # noqa: E402
from monitor.fm_engine import FmSettings  # noqa: E402

CASES = [
    # name, fs, kind, carrier, deviation, tone, IF bandwidth, target x real time
    ("48 kHz beat", 48000, "real", 9000.0, 3000.0, 1000.0, 10000.0, 500.0),
    ("192 kHz I/Q", 192000, "complex", 30000.0, 5000.0, 1000.0, 16000.0, 100.0),
]


def make(path: Path, fs, kind, carrier, dev, tone, bw, seconds, cnr_db=30.0, seed=3):
    """Single-tone FM plus white noise giving cnr_db in the IF bandwidth (numpy)."""
    rng = np.random.default_rng(seed)
    amp = 0.5
    noise_density = (amp**2 / (2 if kind == "real" else 1)) / 10 ** (cnr_db / 10) / bw
    sigma = np.sqrt(noise_density * fs / 2)  # real noise, or per rail of complex noise
    with sf.SoundFile(path, "w", fs, 1 if kind == "real" else 2, subtype="FLOAT") as f:
        for k in range(int(seconds)):
            t = (np.arange(fs) + k * fs) / fs
            ph = 2 * np.pi * carrier * t + dev / tone * np.sin(2 * np.pi * tone * t)
            if kind == "real":
                f.write(amp * np.cos(ph) + sigma * rng.standard_normal(fs))
            else:
                i = amp * np.cos(ph) + sigma * rng.standard_normal(fs)
                q = amp * np.sin(ph) + sigma * rng.standard_normal(fs)
                f.write(np.stack([i, q], axis=1))


def naive(path: Path, kind: str) -> float:
    """Notebook style: whole file in memory, analytic signal, unwrap, per-second max/min;
    returns the mean per-second peak deviation."""
    from scipy.signal import hilbert

    x, fs = sf.read(path)
    z = hilbert(x) if kind == "real" else x[:, 0] + 1j * x[:, 1]
    inst = np.diff(np.unwrap(np.angle(z))) * fs / (2 * np.pi)
    inst -= inst.mean()
    n = int(fs)
    peaks = [
        (inst[i : i + n].max() - inst[i : i + n].min()) / 2 for i in range(0, inst.size - n + 1, n)
    ]
    return float(np.mean(peaks))


def best_of(runs: dict, repeat: int) -> dict:
    """Each contender once to warm up, then `repeat` rounds taking them in turn; the best
    wall time of each (the machine is shared: the best is the least disturbed)."""
    out = {name: [None, float("inf")] for name in runs}
    for name, fn in runs.items():
        out[name][0] = fn()
    for _ in range(repeat):
        for name, fn in runs.items():
            t0 = time.perf_counter()
            fn()
            out[name][1] = min(out[name][1], time.perf_counter() - t0)
    return {name: tuple(v) for name, v in out.items()}


def peak_rss_mb(path: Path, mode: str, bw: float) -> float:
    """Peak resident memory (MB) of a fresh process running one analyze_file call,
    workers included (the larger of the parent's and the largest child's)."""
    # The process's own peak from /proc (VmHWM): ru_maxrss would carry over the peak of
    # the benchmark process it was forked from before exec; the workers' from
    # RUSAGE_CHILDREN (forked after exec). Both in kB.
    code = (
        "import resource, sys; sys.path.insert(0, sys.argv[1]);"
        "from monitor.engine import AnalysisSettings, analyze_file;"
        "from monitor.fm_engine import FmSettings;"
        "s = AnalysisSettings(mode=sys.argv[3], fm=FmSettings(if_bandwidth_hz=float(sys.argv[4])));"
        "analyze_file(sys.argv[2], settings=s, jobs=None);"
        "hwm = [int(ln.split()[1]) for ln in open('/proc/self/status') if ln.startswith('VmHWM')];"
        "own = hwm[0] if hwm else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss;"
        "print(max(own, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss))"
    )
    try:
        import resource  # noqa: F401  (not on Windows)
    except ImportError:
        return float("nan")
    res = subprocess.run(
        [sys.executable, "-c", code, str(ROOT), str(path), mode, str(bw)],
        capture_output=True,
        text=True,
        check=True,
    )
    return int(res.stdout.strip()) / 1024


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--beat-seconds", type=float, default=600.0, help="beat record (600)")
    ap.add_argument("--iq-seconds", type=float, default=180.0, help="I/Q record (180)")
    ap.add_argument("--repeat", type=int, default=3, help="timed rounds (3)")
    args = ap.parse_args(argv or [])
    print(f"== FM analysis at 30 dB C/N in the IF bandwidth, {os.cpu_count()} CPUs ==")
    print(f"{'case':<12} {'record':>7} {'who':<11} {'x real time':>11} {'target':>7} "
          f"{'x naive':>8} {'dev error (tone)':>17} {'dev error (peak avg)':>21}")  # fmt: skip
    ok = True
    with tempfile.TemporaryDirectory() as d:
        for name, fs, kind, carrier, dev, tone, bw, target in CASES:
            long_s = args.beat_seconds if kind == "real" else args.iq_seconds
            mode = "beat" if kind == "real" else "iq"
            settings = AnalysisSettings(mode=mode, fm=FmSettings(if_bandwidth_hz=bw))
            rss = {}
            for seconds in (60.0, long_s):
                path = Path(d) / f"{mode}_{seconds:g}.wav"
                make(path, fs, kind, carrier, dev, tone, bw, seconds)
                runs = {
                    "swingmeter": lambda p=path, s=settings: analyze_file(p, settings=s, jobs=None),
                    "--jobs 1": lambda p=path, s=settings: analyze_file(p, settings=s, jobs=1),
                    "naive": lambda p=path, k=kind: naive(p, k),
                }
                res = best_of(runs, args.repeat)
                naive_speed = seconds / res["naive"][1]
                for who, (result, t) in res.items():
                    if who == "naive":
                        e_tone, e_peak = "—", f"{100 * (result / dev - 1):+20.3f}%"
                    else:
                        fm = result.extra["fm"]["deviation"]
                        err = fm["tone_peak_hz"] / dev - 1
                        ok &= abs(err) <= 0.005
                        e_tone = f"{100 * err:+16.3f}%"
                        e_peak = f"{100 * (fm['peak_avg_hz'] / dev - 1):+20.3f}%"
                    speed = seconds / t
                    tgt = ""
                    if who == "swingmeter" and seconds == long_s:
                        tgt = f"{target:7.0f}"
                        ok &= speed >= target
                    label = name if who == "swingmeter" else ""
                    print(f"{label:<12} {seconds:6.0f}s {who:<11} {speed:11.0f} {tgt:>7} "
                          f"{speed / naive_speed:8.2f} {e_tone:>17} {e_peak:>21}",
                          flush=True)  # fmt: skip
                one, par = res["--jobs 1"][0], res["swingmeter"][0]
                same = all(
                    abs(a.carrier_hz - b.carrier_hz) <= 1e-6 * max(1.0, a.carrier_uncertainty_hz)
                    for a, b in zip(one.readings, par.readings, strict=True)
                )
                print(f"{'':<12} {'':>7} in parts and in one process: readings "
                      f"{'agree' if same else 'DIFFER'}", flush=True)  # fmt: skip
                ok &= same
                rss[seconds] = peak_rss_mb(path, mode, bw)
                path.unlink()
            print(f"{'':<12} peak RSS of analyze (fresh process): "
                  f"{rss[60.0]:.0f} MB for 60 s, {rss[long_s]:.0f} MB for {long_s:.0f} s",
                  flush=True)  # fmt: skip
    print("all targets met" if ok else "a target is missed (see above)")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
