"""``echoreo preview``: renders a shipped choreography; bad input exits 2 without a traceback."""

from __future__ import annotations

from PIL import Image

from echoreo.choreographies import DATA_DIR
from echoreo.runner.cli import main

HEAD = str(DATA_DIR / "warmup-head.yaml")


def test_preview_writes_gif_and_strip(tmp_path, capsys):
    out = tmp_path / "p.gif"
    rc = main(["preview", HEAD, "--out", str(out), "--max-frames", "4", "--key-frames", "3"])
    assert rc == 0
    with Image.open(out) as im:
        assert im.n_frames == 4
    with Image.open(tmp_path / "p.png") as im:
        assert im.size[0] > 100
    text = capsys.readouterr().out
    assert "Simulation only" in text and "robot-safety standards" in text


def test_preview_bad_inputs(tmp_path, capsys):
    assert main(["preview", str(tmp_path / "none.yaml"), "--out", str(tmp_path / "a.gif")]) == 2
    assert main(["preview", HEAD, "--out", str(tmp_path / "a.mp4")]) == 2
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    # a missing folder is created; a path through a file cannot be
    assert main(["preview", HEAD, "--out", str(blocker / "a.gif")]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err and err.count("error:") == 3
