"""The live view: keys in a terminal (a real pseudo-terminal and a real subprocess),
and the drawing of a status without one."""

from __future__ import annotations

import io
import json
import os
import select
import subprocess
import sys
import time
from pathlib import Path

from rich.console import Console

from echoreo.runner.liveview import (
    SAFETY_CAUTION,
    SessionStatus,
    StreamStatus,
    make_view,
    render_status,
)
from echoreo.sessionfile import SessionFile

TINY = (Path(__file__).parent / "data" / "tiny-raise.yaml").read_text(encoding="utf-8")


def test_status_drawing_shows_everything():
    """Step, move, rep i/N, countdown, cue, times, stream health, lateness, safety, caution."""
    st = SessionStatus(study="s", participant="P01", clock="real", phase="choreography",
                       choreography="tiny", item=1, n_items=2, step=2, move="raise",
                       repetition=1, n_repetitions=4, countdown_s=2.0, cue="Raise your arm",
                       elapsed_s=12.0, remaining_s=48.0, safety="moving", lateness_ms=0.2,
                       lateness_max_ms=1.5, keys=True,
                       streams=[StreamStatus("right_wrist_imu", "robot left_wrist",
                                             samples=1200, rate_hz=99.8, nominal_hz=100,
                                             dropped=3, latency_ms=4.2, offset_ms=-4200.0,
                                             offset_unc_ms=0.4, silent=True)],
                       warnings=["stream right_wrist_imu is silent"], grades=["raise #1: 80"])
    buf = io.StringIO()
    Console(file=buf, width=160, color_system=None).print(render_status(st))
    out = buf.getvalue()
    for text in ("raise", "1/4", "countdown", "Raise your arm", "0:12 elapsed", "0:48 remaining",
                 "right_wrist_imu (silent)", "99.8/100", "-4200.000 ± 0.400", "max 1.50 ms",
                 "moving", "p pause", "raise #1: 80", "not a medical device"):
        assert text in out, text


def test_no_terminal_means_plain_lines():
    """Without a terminal the view prints plain lines and reads no keys."""
    buf = io.StringIO()
    view = make_view(Console(file=buf), SessionStatus())
    with view:
        view.log(1.5, "hello")
    assert view.keys() == []
    assert "[    1.50 s] hello" in buf.getvalue()
    assert SAFETY_CAUTION[:40] in buf.getvalue()


def test_keys_pause_resume_stop_in_a_terminal(tmp_path):
    """In a pseudo-terminal: `p` pauses (robot holds), `p` resumes, `s` stops in a controlled
    way; the events say so and the command exits 0."""
    (tmp_path / "tiny.yaml").write_text(TINY, encoding="utf-8")
    (tmp_path / "plan.yaml").write_text("""\
study: keys-test
participant: K01
consent_recorded: true
robot: torso-e1
mode: mirror
command_rate_hz: 50
countdown_s: 1
choreographies: [tiny.yaml]
streams:
  - {stream: right_wrist_imu, kind: imu, site: right_wrist}
leader: {adapter: simulated, seed: 1}
followers:
  - {adapter: simulated, seed: 2}
""", encoding="utf-8")
    master, slave = os.openpty()
    env = {**os.environ, "TERM": "xterm-256color", "COLUMNS": "120", "LINES": "60"}
    proc = subprocess.Popen([sys.executable, "-m", "echoreo.runner.cli", "session",
                             str(tmp_path / "plan.yaml"), "--clock", "real",
                             "--no-live-grades", "--out", str(tmp_path / "out")],
                            stdin=slave, stdout=slave, stderr=slave, env=env, close_fds=True)
    os.close(slave)
    out = bytearray()

    def pump(seconds: float, until: bytes | None = None) -> None:
        end = time.monotonic() + seconds
        while time.monotonic() < end:
            r, _, _ = select.select([master], [], [], 0.05)
            if r:
                try:
                    out.extend(os.read(master, 65536))
                except OSError:
                    return
            if until is not None and until in out:
                return

    try:
        pump(60.0, until=b"keys: p pause")      # the live view is up
        pump(1.0)
        os.write(master, b"p")
        pump(0.6)
        os.write(master, b"p")
        pump(0.5)
        os.write(master, b"s")
        deadline = time.monotonic() + 30
        while proc.poll() is None and time.monotonic() < deadline:
            pump(0.2)
    finally:
        if proc.poll() is None:
            proc.kill()
        proc.wait(10)
        os.close(master)
    assert proc.returncode == 0, out.decode(errors="replace")[-2000:]
    files = list((tmp_path / "out").glob("*.sqlite"))
    assert len(files) == 1
    f = SessionFile(files[0])
    ev = f.events()
    kinds = ev["kind"].tolist()
    assert kinds.count("pause") == 1 and kinds.count("resume") == 1
    stops = [json.loads(d) for d in ev[ev["kind"] == "stop"]["detail"]]
    assert stops and stops[0]["reason"] == "operator" and stops[0]["controlled"]
    assert f.state == "complete" and f.meta["outcome"] == "stopped"
    assert f.meta["held_s"] > 0.3
    # the controlled stop ends at the rest pose
    last = f.read_stream("leader_command").iloc[-1]
    from echoreo.sim import load_robot

    robot = load_robot("torso-e1")
    assert max(abs(last[n] - r) for n, r in zip(robot.joint_names, robot.rest,
                                                strict=True)) < 1e-9
