"""`swingmeter record`: record a sound-card input to a crash-safe WAV (or SigMF) file.

`add_input_options` and `meta_from_args` describe a sound-card input on the command line;
`live` uses them too.
"""

from __future__ import annotations

import argparse
import contextlib
import dataclasses
import sys
import time

from monitor.blocks import MODES
from monitor.errors import InputError
from monitor.units import (
    channel_arg,
    duration_arg,
    frequency_arg,
    harmonic_arg,
    positive_frequency_arg,
)

HELP = "record a sound-card input to a crash-safe WAV/RF64 (or SigMF) file with its metadata"
EPILOG = """\
examples:
  swingmeter record --duration 60 vfo-warmup.wav
  swingmeter record --device pulse --rate 48000 --duration 10 take1.wav
  swingmeter record --mode beat --dial 7.030M --sideband upper --duration 600 xtal.wav
  swingmeter record --mode beat --dial 144.9M --harmonic 3 --duration 30 tripler.wav
  swingmeter record --mode iq --dial 433.92M --swap-iq --duration 20 --sigmf fob
  swingmeter record --profile bench-a --duration 3600 overnight.wav

The file stays readable if the program is killed (the header is kept up to date as it
goes; after a power cut, all but the last few seconds). The metadata go beside it to
OUT.wav.swingmeter.json (SigMF: OUT.sigmf-meta as well). Recordings that would pass
4 GiB are written as RF64. Ctrl+C stops early and closes the file properly.

Set the line-in / microphone level so that the loudest peaks stay well below full scale:
clipped samples add harmonics and spurs that are not in the signal. `swingmeter live`
shows the level.
"""

SUBTYPES = ("PCM_16", "PCM_24", "PCM_32", "FLOAT")


def add_input_options(p: argparse.ArgumentParser) -> None:
    """Options that describe a sound-card input and its stream (shared with `live`)."""
    p.add_argument(
        "--device",
        metavar="DEV",
        help="input device: index or part of the name, see `swingmeter devices` "
        "(default: the system's default input)",
    )
    p.add_argument(
        "--rate",
        type=positive_frequency_arg,
        default=48000.0,
        metavar="HZ",
        help="sample rate, always set on the device (default: 48000)",
    )
    p.add_argument(
        "--mode",
        choices=MODES,
        default="audio",
        help="audio: a receiver's demodulated audio; beat: the carrier as an audio beat "
        "note; iq: two channels as I and Q (default: audio)",
    )
    p.add_argument(
        "--channel",
        type=channel_arg,
        default=0,
        metavar="N",
        help="input channel to read, from 0; in iq mode the I channel, Q is N+1 (default: 0)",
    )
    p.add_argument(
        "--swap-iq", action="store_true", help="iq mode: I is the second channel, Q the first"
    )
    p.add_argument(
        "--dial",
        type=frequency_arg,
        metavar="HZ",
        help="receiver dial frequency, e.g. 7.030M; in iq mode the I/Q centre (default: none)",
    )
    p.add_argument(
        "--sideband",
        choices=("upper", "lower"),
        default="upper",
        help="receiver sideband in beat mode (default: upper)",
    )
    p.add_argument(
        "--harmonic",
        type=harmonic_arg,
        default=1,
        metavar="N",
        help="the receiver hears harmonic N of the oscillator (default: 1, the fundamental)",
    )
    clock = p.add_mutually_exclusive_group()
    clock.add_argument(
        "--clock-ppm",
        type=float,
        default=None,
        metavar="P",
        help="sound-card clock correction in ppm, P = (true rate / nominal - 1) * 1e6 "
        "(default: 0, or the bench profile's)",
    )
    clock.add_argument(
        "--profile",
        metavar="NAME",
        help="apply the bench profile NAME (see `swingmeter calibrate`; default: none)",
    )


def meta_from_args(args):
    """The StreamMeta described by the options of `add_input_options`.

    `source`, `fs_hz` and `channels` are provisional: the sound-card source fills in the
    device's real name and the channels it opened.

    Raises
    ------
    ProfileError
        If `--profile` names no saved bench profile.
    """
    from monitor.blocks import StreamMeta

    clock_ppm = 0.0
    profile = getattr(args, "profile", None)
    if profile:
        from monitor import profiles

        clock_ppm = float(profiles.load(profile).get("clock_ppm", 0.0))
    elif getattr(args, "clock_ppm", None) is not None:
        clock_ppm = float(args.clock_ppm)
    dial = getattr(args, "dial", None)
    return StreamMeta(
        source=str(args.device) if args.device is not None else "default",
        fs_hz=float(args.rate),
        channels=args.channel + (2 if args.mode == "iq" else 1),
        mode=args.mode,
        clock_ppm=clock_ppm,
        center_hz=dial if args.mode == "iq" else None,
        dial_hz=dial,
        sideband=args.sideband,
        harmonic=args.harmonic,
        profile=profile or None,
    )


def source_from_args(args, *, duration_s: float | None = None, block_frames: int = 4096):
    """A SoundCardSource for the options of `add_input_options` (not opened yet)."""
    from monitor.audio import SoundCardSource

    return SoundCardSource(
        args.device,
        args.rate,
        args.mode,
        args.channel,
        meta=meta_from_args(args),
        swap_iq=args.swap_iq,
        block_frames=block_frames,
        duration_s=duration_s,
    )


def add_parser(sub) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "record",
        help=HELP,
        description="Record a sound-card input for a set time. The file is written by its "
        "own thread and kept readable at every moment; the stream's metadata (mode, rate, "
        "device, dial, sideband, harmonic, clock correction, bench profile, UTC start) go "
        "to a JSON sidecar. Lost input (overflows, dropped blocks) is counted and reported.",
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("out", metavar="OUT.wav", help="output file")
    p.add_argument(
        "--duration",
        type=duration_arg,
        required=True,
        metavar="S",
        help="seconds to record (required; also decides WAV or RF64)",
    )
    add_input_options(p)
    p.add_argument(
        "--subtype",
        choices=SUBTYPES,
        default=None,
        help="sample format (default: PCM_24 for audio/beat, FLOAT for iq)",
    )
    p.add_argument(
        "--sigmf",
        action="store_true",
        help="iq mode: write SigMF (OUT.sigmf-data + OUT.sigmf-meta) instead of WAV",
    )
    return p


class _Progress:
    """A one-line progress display on stderr, only when stderr is a terminal."""

    def __init__(self, total_s: float):
        self.total_s = total_s
        self.tty = sys.stderr.isatty()
        self.last = 0.0

    def update(self, done_s: float, stats, force: bool = False) -> None:
        now = time.monotonic()
        if not self.tty or (not force and now - self.last < 0.5):
            return
        self.last = now
        sys.stderr.write(
            f"\rrecording {done_s:7.1f} / {self.total_s:.1f} s   overflows {stats.overflows}"
            f"   dropped blocks {stats.dropped_blocks}  "
        )
        sys.stderr.flush()

    def end(self) -> None:
        if self.tty:
            sys.stderr.write("\n")


def run(args) -> int:
    from monitor.record import Recorder, check_output_path

    if args.sigmf and args.mode != "iq":
        raise InputError(f"--sigmf needs --mode iq (not {args.mode!r})")
    if not args.sigmf:  # SigMF names its own files; the recorder checks those
        check_output_path(args.out)  # before the device is opened
    source = source_from_args(args, duration_s=args.duration)
    interrupted = False
    recorder = None
    progress = _Progress(args.duration)
    try:
        source.open()
        recorder = Recorder(
            args.out,
            source.meta,
            subtype=args.subtype,
            sigmf=args.sigmf,
            duration_s=args.duration,
        )
        print(
            f"recording {args.duration:g} s from {source.meta.source!r} at {args.rate:g} Hz "
            f"({args.mode}) into {recorder.path}; Ctrl+C stops",
            file=sys.stderr,
        )
        for block in source:
            recorder.write(block)
            progress.update((block.start + len(block)) / args.rate, source.stats)
    except KeyboardInterrupt:
        interrupted = True
    except BaseException:
        if recorder is not None:  # leave the file closed and its sidecar written
            with contextlib.suppress(InputError):
                recorder.close(extra={"capture": dataclasses.asdict(source.stats)})
        raise
    finally:
        source.close()
        progress.end()
    if recorder is None:
        return 130 if interrupted else 2
    stats = source.stats
    extra = {"capture": dataclasses.asdict(stats)}
    if interrupted:
        extra["stopped_by"] = "Ctrl+C"
    summary = recorder.close(extra=extra)
    if interrupted:
        print("stopped by Ctrl+C; the file is closed and complete", file=sys.stderr)
    print(
        f"wrote {summary.path}: {summary.duration_s:.2f} s, {summary.frames} frames, "
        f"{summary.container} {summary.subtype}; metadata in {summary.sidecar}",
        file=sys.stderr,
    )
    print(
        f"overflows: {stats.overflows}, dropped blocks: {stats.dropped_blocks} "
        f"({stats.dropped_frames} frames), gaps in the file: {summary.gaps} "
        f"({summary.lost_frames} frames missing)",
        file=sys.stderr,
    )
    if stats.overflows or stats.dropped_blocks:
        print(
            "warning: input was lost; the gaps are listed in the metadata sidecar. Close "
            "other busy programs or write to a faster disk.",
            file=sys.stderr,
        )
    return 130 if interrupted else 0
