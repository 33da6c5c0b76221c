"""`swingmeter calibrate deviation`: the audio-mode deviation factor of a receiver.

A broadcast receiver's audio amplitude is proportional to the deviation once its
de-emphasis is undone. The factor (Hz of deviation per unit of full-scale audio) comes
from either
  (a) a pair of recordings of the same modulation, one `audio` (the receiver) and one
      `beat`/`iq` (measured directly), or
  (b) an `audio` recording made at a deviation the user states (for instance found with
      the carrier-null procedure: with a 1 kHz tone, the first carrier null is at
      2404.83 Hz peak deviation).
It is saved in the bench profile with the receiver's de-emphasis.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import math

from monitor.errors import InputError
from monitor.units import positive_frequency_arg

ACTION = "deviation"
TAUS = {"none": None, "50us": 50e-6, "75us": 75e-6}


def add_action(acts) -> None:
    p = acts.add_parser(
        ACTION,
        help="derive the audio-mode deviation factor and save it in a bench profile",
        description=__doc__,
        epilog="examples:\n"
        "  swingmeter calibrate deviation --audio rx.wav --reference to7-beat.wav "
        "--reference-mode beat --deemphasis 50us --profile bench-a\n"
        "  swingmeter calibrate deviation --audio rx-null.wav --deviation 2404.83 "
        "--deemphasis 50us --profile bench-a\n",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--audio", required=True, metavar="FILE", help="the receiver's audio")
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument(
        "--reference",
        metavar="FILE",
        help="a beat-note or I/Q recording of the same modulation",
    )
    src.add_argument(
        "--deviation",
        type=positive_frequency_arg,
        metavar="HZ",
        help="the peak deviation of the modulating tone in the audio recording",
    )
    p.add_argument(
        "--reference-mode",
        choices=("beat", "iq"),
        default=None,
        help="mode of --reference (default: from its metadata, else beat)",
    )
    p.add_argument(
        "--deemphasis",
        choices=tuple(TAUS),
        default="none",
        help="the receiver's de-emphasis, undone before scaling (50us Europe, 75us the "
        "Americas; default: none)",
    )
    p.add_argument("--profile", required=True, metavar="NAME", help="bench profile to save in")
    p.add_argument("--json", action="store_true", dest="json_sub", help="print JSON")


def audio_tone(path: str, deemphasis: str):
    """(tone_hz, amplitude after undoing de-emphasis, analysis) of an audio recording."""
    from monitor.engine import AnalysisSettings, analyze_file

    a = analyze_file(path, settings=AnalysisSettings(mode="audio"))
    tone = a.summary.tone
    if tone.frequency_hz is None or tone.amplitude_dbfs is None:
        raise InputError(f"{path}: no modulating tone found in the audio")
    amp = 10 ** (tone.amplitude_dbfs / 20)
    tau = TAUS[deemphasis]
    if tau is not None:
        # the de-emphasis 1/(1 + j w tau) lowered the tone by this much
        amp *= math.hypot(1.0, 2 * math.pi * tone.frequency_hz * tau)
    return tone.frequency_hz, amp, a


def reference_deviation(path: str, mode: str | None):
    """(tone_hz, peak deviation of the tone) from a beat/iq recording."""
    from monitor.engine import AnalysisSettings, analyze_file
    from monitor.fm_engine import FmSettings
    from monitor.sources import recorded_mode

    mode = mode or recorded_mode(path) or "beat"
    if mode not in ("beat", "iq"):
        raise InputError(f"{path}: the reference must be a beat or iq recording, not {mode}")
    a = analyze_file(path, settings=AnalysisSettings(mode=mode, fm=FmSettings()))
    fm = a.extra.get("fm")
    if not fm or fm.get("mod_tone_hz") is None:
        raise InputError(f"{path}: no modulating tone found in the reference")
    return fm["mod_tone_hz"], fm["deviation"]["tone_peak_hz"], a


def run(args) -> int:
    from rich.console import Console

    from monitor import output, profiles

    profiles.check_name(args.profile)
    f_audio, amp, _ = audio_tone(args.audio, args.deemphasis)
    if args.reference:
        f_ref, dev, _ = reference_deviation(args.reference, args.reference_mode)
        if abs(f_ref - f_audio) > max(1.0, 0.01 * f_ref):
            raise InputError(
                f"the audio's tone ({f_audio:.2f} Hz) and the reference's modulating tone "
                f"({f_ref:.2f} Hz) differ: not the same modulation"
            )
        how = f"reference {args.reference}"
    else:
        dev = args.deviation
        how = "stated deviation"
    factor = dev / amp
    now = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    profiles.update(
        args.profile,
        deviation_hz_per_unit=factor,
        deviation_deemphasis=args.deemphasis,
        deviation_tone_hz=f_audio,
        deviation_reference=how,
        deviation_measured_utc=now,
    )
    result = {
        "profile": args.profile,
        "deviation_hz_per_unit": factor,
        "deviation_hz": dev,
        "audio_tone_hz": f_audio,
        "audio_amplitude": amp,
        "deemphasis": args.deemphasis,
    }
    if args.json:
        print(output.dumps(result))
    else:
        Console().print(
            f"deviation factor {factor:.6g} Hz per unit of full scale saved in bench profile "
            f"[bold]{args.profile}[/bold]\n  {dev:.2f} Hz peak deviation ({how}) for a "
            f"{f_audio:.2f} Hz tone at {20 * math.log10(amp):.2f} dBFS after undoing "
            f"{args.deemphasis} de-emphasis"
        )
    return 0
