"""Benchmark of the FM discriminator: throughput and deviation accuracy.

Compares dsp.fm.FmDemodulator, fed gate by gate, with a naive whole-file baseline
(scipy.signal.hilbert, np.unwrap(np.angle), np.diff, per-second max/min) on single-tone
FM at 30 dB carrier-to-noise ratio in the IF bandwidth, and times both.

    .venv/bin/python bench/bench_fm.py [--seconds 20] [--repeat 5]
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time

# one BLAS thread, as the engine runs (see monitor/__init__.py): the CPU column then means
# one core
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402
import scipy.signal as ssig  # noqa: E402

from dsp.fm import FmDemodulator, carson_bandwidth_hz, deviation_figures  # noqa: E402


def _audio_filter(fs_hz: float, band: str):
    """Post-demodulation band, as the engine uses it (dsp.filters)."""
    from dsp.filters import filter_sos

    return filter_sos(band, fs_hz)


def fm_signal(fs, seconds, carrier, dev, fm, cnr_db, if_bw, kind, rng):
    """Single-tone FM plus white noise giving cnr_db in if_bw (numpy)."""
    t = np.arange(int(fs * seconds)) / fs
    phase = 2 * np.pi * carrier * t + (dev / fm) * np.sin(2 * np.pi * fm * t)
    if kind == "real":
        a = 0.5
        x = a * np.cos(phase)
        p_c = a * a / 2
        # Real white noise of variance s^2 spreads s^2 over fs/2 (one-sided).
        s = math.sqrt(p_c / 10 ** (cnr_db / 10) / if_bw * fs / 2)
        return x + s * rng.standard_normal(t.size)
    a = 0.5
    z = a * np.exp(1j * phase)
    p_c = a * a
    s = math.sqrt(p_c / 10 ** (cnr_db / 10) / if_bw * fs / 2)  # per arm
    return z + s * (rng.standard_normal(t.size) + 1j * rng.standard_normal(t.size))


def time_demod(x, fs, carrier, bw, kind, repeat, min_fs_out_hz=None):
    """Best wall and CPU time over repeats, feeding 1 s gates."""
    best_wall = best_cpu = math.inf
    out = None
    gate = int(fs)
    for _ in range(repeat):
        dm = FmDemodulator(fs, carrier, bw, kind=kind, min_fs_out_hz=min_fs_out_hz)
        t0, c0 = time.perf_counter(), time.process_time()
        parts = [dm.process(x[i : i + gate]) for i in range(0, x.size, gate)]
        best_wall = min(best_wall, time.perf_counter() - t0)
        best_cpu = min(best_cpu, time.process_time() - c0)
        out = (dm, np.concatenate(parts))
    return best_wall, best_cpu, out


def naive(x, fs):
    """Whole-file analytic signal, unwrapped phase, difference, per-second extremes."""
    z = ssig.hilbert(x) if np.isrealobj(x) else x
    f = np.diff(np.unwrap(np.angle(z))) * fs / (2 * np.pi)
    f -= np.median(f)
    n = int(fs)
    peaks = [(f[i : i + n].max() - f[i : i + n].min()) / 2 for i in range(0, f.size - n + 1, n)]
    return f, float(np.median(peaks))


def run_case(name, fs, kind, carrier, dev, fm, seconds, repeat, rng, band="300-3000"):
    bw = carson_bandwidth_hz(dev, fm) * 1.25
    x = fm_signal(fs, seconds, carrier, dev, fm, 30.0, bw, kind, rng)
    min_out = 2.2 * 15000.0 if band == "20-15k" else None
    t_d, t_cpu, (dm, f) = time_demod(x, fs, carrier, bw, kind, repeat, min_out)
    sos = _audio_filter(dm.fs_out_hz, band)
    fa = ssig.sosfilt(sos, f)[int(0.2 * dm.fs_out_hz) :]
    fig = deviation_figures(fa)
    t0 = time.perf_counter()
    _, naive_peak = naive(x, fs)
    t_n = time.perf_counter() - t0
    err = lambda v: 100.0 * (v - dev) / dev  # noqa: E731
    print(
        f"\n{name}: fs {fs / 1e3:g} kHz {kind}, carrier {carrier:g} Hz, deviation {dev:g} Hz "
        f"at {fm:g} Hz,\n  IF bandwidth {bw:g} Hz (Carson x 1.25), 30 dB C/N in the IF band"
    )
    print(f"  decimation {dm.decimation} -> {dm.fs_out_hz:g} Hz, {dm.numtaps} taps")
    print(f"  {'method':<42}{'x real time':>12}{'deviation':>12}{'error':>9}")
    rows = [
        ("FmDemodulator, 1 s gates, wall", seconds / t_d, None, None),
        ("FmDemodulator, 1 s gates, CPU", seconds / t_cpu, None, None),
        (f"  + {band} Hz, peak_avg_hz", None, fig.peak_avg_hz, err(fig.peak_avg_hz)),
        (f"  + {band} Hz, rms_sqrt2_hz", None, fig.rms_sqrt2_hz, err(fig.rms_sqrt2_hz)),
        ("naive hilbert/unwrap/diff, per-s max/min", seconds / t_n, naive_peak, err(naive_peak)),
    ]
    for label, speed, value, e in rows:
        s = f"{speed:12.0f}" if speed is not None else " " * 12
        v = f"{value:12.1f}{e:+8.2f}%" if value is not None else ""
        print(f"  {label:<42}{s}{v}")
    return seconds / t_d, seconds / t_cpu


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=20.0, help="signal length (default 20)")
    ap.add_argument("--repeat", type=int, default=5, help="timing repeats, best kept (5)")
    args = ap.parse_args([] if argv is None else argv)  # bench/run.py calls main()
    rng = np.random.default_rng(412)
    try:
        load = os.getloadavg()[0]
        print(
            f"load average {load:.2f} on {os.cpu_count()} CPUs (timings are best of {args.repeat})"
        )
    except OSError:
        pass
    s = args.seconds
    r48 = run_case(
        "beat, land-mobile", 48000.0, "real", 12000.0, 3000.0, 1000.0, s, args.repeat, rng
    )
    run_case("beat, narrow", 48000.0, "real", 9000.0, 1600.0, 800.0, s, args.repeat, rng)
    r192 = run_case(
        "I/Q, land-mobile", 192000.0, "complex", 25000.0, 5000.0, 1000.0, s / 2, args.repeat, rng
    )
    run_case(
        "I/Q, wide",
        192000.0,
        "complex",
        10000.0,
        50000.0,
        5000.0,
        s / 4,
        args.repeat,
        rng,
        band="20-15k",
    )
    print(
        f"\ndemodulator alone (no targets of its own; the FM targets, 500x and 100x, are "
        f"for the whole analysis: bench_analyze_fm.py): 48 kHz real {r48[0]:.0f}x wall, "
        f"{r48[1]:.0f}x CPU; 192 kHz complex {r192[0]:.0f}x wall, {r192[1]:.0f}x CPU"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
