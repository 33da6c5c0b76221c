"""A real sound server for tests: PulseAudio with a null sink, in a private runtime dir.

Use with `from tests.soundserver import pulse_server` (or `pytest_plugins`). The fixture
starts `pulseaudio` per test with a null sink `bench` (48000 Hz, stereo), points
PULSE_RUNTIME_PATH / PULSE_SERVER at it, sets PULSE_SOURCE=bench.monitor (so PortAudio's
ALSA device `pulse` records what is played into the sink) and stops the daemon by its
pid file afterwards. In CI (CI=true) on Linux a failure to start it fails the test;
elsewhere the test is skipped with the reason.

PortAudio reads its device list, and ALSA's pulse plugin its server, when `sounddevice`
is imported: a process that imported it before the variables were set does not see the
`pulse` device. The fixture therefore re-initialises PortAudio in this process
(`monitor.audio.reinitialize_portaudio`, i.e. sounddevice's `_terminate()` +
`_initialize()`) once the variables are set; subprocesses started with `server.env` need
nothing.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest

SINK = "bench"
SINK_RATE_HZ = 48000
SINK_CHANNELS = 2


@dataclass
class PulseServer:
    """A running PulseAudio daemon with a null sink."""

    runtime_dir: Path
    pid: int
    sink: str = SINK
    env: dict[str, str] = field(default_factory=dict)

    @property
    def source(self) -> str:
        return f"{self.sink}.monitor"

    def play(self, wav: str | os.PathLike) -> subprocess.Popen:
        """Start `paplay` of a file into the null sink; returns the process."""
        return subprocess.Popen(
            ["paplay", "-d", self.sink, str(wav)],
            env=self.env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
        )


def must_have_sound_server() -> bool:
    """True where a missing sound server is a failure: CI (CI=true) on Linux.

    The project's CI set-up (.ci/sysdeps) installs PulseAudio on Debian-family Linux;
    macOS and Windows runners have no PulseAudio, so there the tests are skipped.
    """
    return os.environ.get("CI", "").lower() == "true" and sys.platform.startswith("linux")


def _unavailable(reason: str):
    if must_have_sound_server():
        pytest.fail(f"sound server unavailable in CI: {reason}")
    pytest.skip(f"sound server unavailable: {reason}")


def _pactl(env: dict[str, str], *args: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        ["pactl", *args], env=env, capture_output=True, text=True, timeout=10, check=False
    )


def _alive(pid: int) -> bool:
    # The daemonized server is not our child: in a container whose init does not reap,
    # it lingers as a zombie that os.kill(pid, 0) still finds.
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except FileNotFoundError:
        return False
    except OSError:
        pass
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


def _stop(runtime_dir: Path, pid: int | None) -> None:
    pid_file = runtime_dir / "pid"
    if pid is None and pid_file.exists():
        try:
            pid = int(pid_file.read_text().split()[0])
        except (OSError, ValueError, IndexError):
            pid = None
    if pid is not None:
        try:
            os.kill(pid, signal.SIGTERM)
            for _ in range(100):
                time.sleep(0.02)
                if not _alive(pid):
                    break
            else:
                os.kill(pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass
    shutil.rmtree(runtime_dir, ignore_errors=True)


def _reinit_portaudio() -> None:
    if "sounddevice" not in sys.modules:
        return  # not imported yet: it will read the environment when it is
    from monitor.audio import reinitialize_portaudio

    reinitialize_portaudio()


def start_pulse_server() -> PulseServer:
    """Start the daemon (see the module docstring); the caller stops it with `stop_pulse_server`.

    Raises
    ------
    RuntimeError
        With the reason, if it does not come up.
    """
    for tool in ("pulseaudio", "pactl", "paplay"):
        if shutil.which(tool) is None:
            raise RuntimeError(
                f"{tool} not found (Debian: apt-get install pulseaudio pulseaudio-utils)"
            )
    runtime_dir = Path(tempfile.mkdtemp(prefix="swingmeter-pulse-"))
    env = dict(os.environ)
    env.update(
        PULSE_RUNTIME_PATH=str(runtime_dir),
        PULSE_SERVER=f"unix:{runtime_dir}/native",
        PULSE_SOURCE=f"{SINK}.monitor",
        PULSE_SINK=SINK,
        # Keep the daemon's state and cookie out of the user's home.
        PULSE_STATE_PATH=str(runtime_dir / "state"),
        PULSE_COOKIE=str(runtime_dir / "cookie"),
    )
    cmd = [
        "pulseaudio",
        "-n",
        "--daemonize=yes",
        "--exit-idle-time=-1",
        "--disallow-exit",
        "--use-pid-file=yes",
        f"--log-target=file:{runtime_dir}/log",
        "-L",
        f"module-native-protocol-unix socket={runtime_dir}/native auth-anonymous=1",
        "-L",
        f"module-null-sink sink_name={SINK} rate={SINK_RATE_HZ} channels={SINK_CHANNELS}",
        "-L",
        "module-always-sink",
    ]
    try:
        done = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=20)
    except (OSError, subprocess.TimeoutExpired) as exc:
        _stop(runtime_dir, None)
        raise RuntimeError(f"pulseaudio did not start: {exc}") from None
    if done.returncode != 0:
        log = (
            (runtime_dir / "log").read_text(errors="replace")[-800:]
            if (runtime_dir / "log").exists()
            else ""
        )
        _stop(runtime_dir, None)
        raise RuntimeError(f"pulseaudio exited {done.returncode}: {done.stderr.strip()} {log}")
    deadline = time.monotonic() + 10
    while True:
        listed = _pactl(env, "list", "short", "sources")
        if listed.returncode == 0 and f"{SINK}.monitor" in listed.stdout:
            break
        if time.monotonic() > deadline:
            _stop(runtime_dir, None)
            raise RuntimeError(f"no {SINK}.monitor source: {listed.stderr.strip()}")
        time.sleep(0.05)
    pid = int((runtime_dir / "pid").read_text().split()[0])
    return PulseServer(runtime_dir=runtime_dir, pid=pid, env=env)


def stop_pulse_server(server: PulseServer) -> None:
    """Stop the daemon by its pid and remove its runtime dir."""
    _stop(server.runtime_dir, server.pid)


_ENV_KEYS = (
    "PULSE_RUNTIME_PATH",
    "PULSE_SERVER",
    "PULSE_SOURCE",
    "PULSE_SINK",
    "PULSE_STATE_PATH",
    "PULSE_COOKIE",
)


@pytest.fixture
def pulse_server():
    """A running PulseAudio null sink `bench`; this process's PortAudio sees device `pulse`."""
    try:
        server = start_pulse_server()
    except RuntimeError as exc:
        _unavailable(str(exc))
    saved = {k: os.environ.get(k) for k in _ENV_KEYS}
    os.environ.update({k: server.env[k] for k in _ENV_KEYS})
    try:
        try:
            _reinit_portaudio()
        except Exception as exc:  # DeviceError: PortAudio missing
            _unavailable(f"PortAudio: {exc}")
        yield server
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
        # No PortAudio re-initialisation here: with the server gone, ALSA's pulse plugin
        # could try to autospawn a daemon. The next fixture re-initialises it anyway.
        stop_pulse_server(server)


# -- helpers for tests that play and capture tones -----------------------------------


def sox_tone(path, seconds, spec, channels=2, fs_hz=SINK_RATE_HZ):
    """A tone file written by sox (an independent generator), e.g. spec = ["sine", "1234.5"]."""
    if shutil.which("sox") is None:
        _unavailable("sox not found (Debian: apt-get install sox)")
    subprocess.run(
        ["sox", "-n", "-r", str(fs_hz), "-c", str(channels), "-b", "24", str(path), "synth",
         str(seconds), *spec],
        check=True, capture_output=True,
    )  # fmt: skip


def fft_peak_hz(x, fs_hz, pad=16):
    """Hann-windowed, zero-padded FFT peak with a parabolic fit on log magnitude."""
    n = len(x)
    nfft = pad * (1 << int(np.ceil(np.log2(n))))
    w = np.hanning(n)
    if np.iscomplexobj(x):
        spec = np.abs(np.fft.fft(x * w, nfft))
        freqs = np.fft.fftfreq(nfft, 1 / fs_hz)
    else:
        spec = np.abs(np.fft.rfft(x * w, nfft))
        freqs = np.fft.rfftfreq(nfft, 1 / fs_hz)
    k = int(np.argmax(spec))
    a, b, c = np.log(spec[[k - 1, k, (k + 1) % nfft]])
    delta = 0.5 * (a - c) / (a - 2 * b + c)
    return float(freqs[k] + delta * fs_hz / nfft)


def steady_part(x, fs_hz, trim_s=0.1):
    """The longest run where the 10 ms RMS is above half its maximum, trimmed at the ends."""
    hop = int(fs_hz // 100)
    n = len(x) // hop
    rms = np.sqrt(np.mean(np.abs(x[: n * hop].reshape(n, hop)) ** 2, axis=1))
    on = rms > 0.5 * rms.max()
    best, run_start, best_span = 0, None, (0, 0)
    for i, flag in enumerate([*on, False]):
        if flag and run_start is None:
            run_start = i
        elif not flag and run_start is not None:
            if i - run_start > best:
                best, best_span = i - run_start, (run_start, i)
            run_start = None
    lo = (best_span[0] * hop) + int(trim_s * fs_hz)
    hi = (best_span[1] * hop) - int(trim_s * fs_hz)
    return x[lo:hi]
