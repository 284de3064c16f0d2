"""``ringdown listen`` through PortAudio end to end, with a virtual sound card.

A private PulseAudio server is started with a null sink; PortAudio (sounddevice) captures that
sink's monitor through ALSA's ``pulse`` device (libasound2-plugins) while ``paplay`` plays a
station session of the invented line into the sink. The reference is ``ringdown check`` of the
same parts. ``.ci/run`` installs libportaudio2, pulseaudio, pulseaudio-utils and
libasound2-plugins when they are missing; without them (or where no server can be started) the
test skips and says why.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest
from test_listen import LINE, _session
from typer.testing import CliRunner

from ringdown.cli import app

SINK = "ringdown_test"
CLI = [sys.executable, "-c", "from ringdown.cli import main; main()"]


def _why_not() -> str | None:
    try:
        import sounddevice  # noqa: F401
    except ImportError as exc:
        return f"sounddevice is not installed ({exc})"
    except OSError as exc:
        return f"sounddevice cannot load PortAudio ({exc}); install libportaudio2"
    for tool in ("pulseaudio", "pactl", "paplay"):
        if shutil.which(tool) is None:
            return f"{tool} not found (Debian packages pulseaudio, pulseaudio-utils)"
    if not any(Path(d, "50-pulseaudio.conf").exists() for d in ("/etc/alsa/conf.d", "/usr/share/alsa/alsa.conf.d")):
        return "ALSA's pulse plugin is missing (Debian package libasound2-plugins)"
    return None


@pytest.fixture
def virtual_card(tmp_path):
    """A private PulseAudio server with a null sink whose monitor is the default source."""
    why = _why_not()
    if why:
        pytest.skip(why)
    run = tmp_path / "pulse"
    run.mkdir()
    env = dict(
        os.environ, PULSE_RUNTIME_PATH=str(run), PULSE_STATE_PATH=str(run), XDG_RUNTIME_DIR=str(run), HOME=str(tmp_path)
    )
    env.pop("PULSE_SERVER", None)
    server = subprocess.Popen(
        [
            "pulseaudio",
            "--daemonize=no",
            "--exit-idle-time=-1",
            "--disallow-exit",
            "-n",
            "--use-pid-file=no",
            "--load=module-native-protocol-unix",
            f"--load=module-null-sink sink_name={SINK} rate=48000",
            "--log-target=stderr",
        ],
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )
    try:
        for _ in range(50):
            if subprocess.run(["pactl", "info"], env=env, capture_output=True).returncode == 0:
                break
            if server.poll() is not None:
                pytest.skip(f"PulseAudio did not start: {server.stderr.read().decode(errors='replace')[-300:]}")
            time.sleep(0.1)
        else:
            pytest.skip("PulseAudio did not answer within 5 s")
        for cmd in (["pactl", "set-default-sink", SINK], ["pactl", "set-default-source", f"{SINK}.monitor"]):
            subprocess.run(cmd, env=env, check=True, capture_output=True)
        yield env
    finally:
        server.terminate()
        try:
            server.wait(timeout=5)
        except subprocess.TimeoutExpired:
            server.kill()


def test_listen_through_portaudio_gives_the_verdicts_of_check(virtual_card, tmp_path):
    env = virtual_card
    runner = CliRunner()
    lim = tmp_path / "limits.toml"
    r = runner.invoke(app, ["limits", "learn", *LINE[1:9], "-o", str(lim), "--jobs", "1"])
    assert r.exit_code == 0, r.output
    parts = [LINE[0], LINE[1], LINE[-1]]  # crack, good_01, soft_heat_treat
    r = runner.invoke(app, ["check", "--limits", str(lim), "--jobs", "1", "--jsonl", "--no-store", *parts])
    expected = {json.loads(x)["path"]: json.loads(x)["verdict"] for x in r.stdout.splitlines() if x.startswith("{")}
    session = tmp_path / "session.wav"
    _session(session, parts, gap_s=1.5)
    devices = subprocess.run([*CLI, "listen", "--list-devices"], env=env, capture_output=True, text=True)
    if "pulse" not in devices.stdout:
        pytest.skip(f"PortAudio sees no 'pulse' device: {devices.stdout.strip()} {devices.stderr.strip()}")
    listen = subprocess.Popen(
        [
            *CLI,
            "listen",
            "--device",
            "pulse",
            "--sample-rate",
            "48000",
            "--duration",
            "10",
            "--jsonl",
            "--limits",
            str(lim),
            "--save-dir",
            str(tmp_path / "taps"),
        ],
        env=env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )
    ready = listen.stderr.readline()  # the stream delivers samples before the first tap plays
    assert "listening: input 'pulse' at 48000 Hz" in ready, ready
    subprocess.run(["paplay", f"--device={SINK}", str(session)], env=env, check=True, timeout=30)
    out, err = listen.communicate(timeout=60)
    assert listen.returncode == 0, err
    taps = [json.loads(x) for x in out.splitlines() if x.startswith("{")]
    assert [t["verdict"] for t in taps] == [expected[p] for p in parts], err
    # the taps came through the sound card resampled to 48 kHz; each saved as a WAV
    assert all(t["analysis"]["sample_rate_hz"] == 48000.0 and Path(t["path"]).exists() for t in taps)
    assert "0 input blocks dropped" in err
