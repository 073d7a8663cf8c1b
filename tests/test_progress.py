"""Progress of the long stages: counts and time left on a terminal, nothing when piped.

The renderer is checked with a fake terminal and a fake clock; the command line is checked in a
subprocess whose stderr is a pseudo-terminal (progress drawn) and then a pipe (nothing but the
result lines). The time left is the linear estimate: mean time per finished step times the
steps left (common practice for progress bars).
"""

from __future__ import annotations

import io
import os
import subprocess
import sys
import threading

import pytest

from timeslice.progress import (
    TerminalProgress,
    format_duration,
    no_progress,
    progress_for,
)


class FakeTTY(io.StringIO):
    """A text stream that says it is a terminal."""

    def isatty(self) -> bool:
        return True


class Clock:
    def __init__(self):
        self.t = 0.0

    def __call__(self) -> float:
        return self.t


def _lines(stream: io.StringIO) -> list[str]:
    """What a terminal shows: each line's last redraw (after the last carriage return)."""
    return [part.split("\r")[-1].rstrip() for part in stream.getvalue().split("\n")]


def test_format_duration():
    assert format_duration(0) == "0:00"
    assert format_duration(7.4) == "0:07"
    assert format_duration(75) == "1:15"
    assert format_duration(3723) == "1:02:03"
    assert format_duration(-3) == "0:00"


def test_terminal_shows_counts_and_time_left():
    tty, clock = FakeTTY(), Clock()
    bar = TerminalProgress(tty, clock=clock, min_interval=0.0)
    bar("transfer", 0, 4)
    assert "0/4" in tty.getvalue() and "-:-- left" in tty.getvalue()
    clock.t = 10.0
    bar("transfer", 1, 4)
    clock.t = 20.0
    bar("transfer", 2, 4)
    shown = _lines(tty)[-1]
    # 2 of 4 steps in 20 s: 10 s per step, 2 steps left -> 20 s left
    assert "transfer" in shown and "2/4" in shown and "50%" in shown
    assert "0:20 elapsed" in shown and "0:20 left" in shown
    assert "[##########----------]" in shown
    clock.t = 40.0
    bar("transfer", 4, 4)
    shown = _lines(tty)
    assert shown[-1] == ""  # the finished stage ends its line
    assert "4/4" in shown[-2] and "100%" in shown[-2] and "0:40 elapsed" in shown[-2]
    assert "left" not in shown[-2]


def test_time_left_counts_from_the_stage_first_call():
    """Steps done before the first call (cached slices) do not speed up the estimate."""
    tty, clock = FakeTTY(), Clock()
    bar = TerminalProgress(tty, clock=clock, min_interval=0.0)
    bar("transfer", 6, 10)  # six slices from the cache
    clock.t = 30.0
    bar("transfer", 7, 10)  # one computed in 30 s, three left -> 90 s
    assert "7/10" in _lines(tty)[-1] and "1:30 left" in _lines(tty)[-1]


def test_each_stage_gets_its_own_line():
    tty, clock = FakeTTY(), Clock()
    bar = TerminalProgress(tty, clock=clock, min_interval=0.0)
    bar("harmonise", 0, 3)
    bar("harmonise", 2, 3)
    bar("fit", 1, 5)  # harmonise did not report its end: its line is ended anyway
    bar("fit", 5, 5)
    bar("summarise", 0, 2)
    bar.finish()
    shown = [line for line in _lines(tty) if line]
    assert [line.split()[0] for line in shown] == ["harmonise", "fit", "summarise"]
    assert "2/3" in shown[0] and "5/5" in shown[1] and "0/2" in shown[2]


def test_redraws_are_throttled_but_the_last_is_drawn():
    tty, clock = FakeTTY(), Clock()
    bar = TerminalProgress(tty, clock=clock, min_interval=1.0)
    for k in range(50):
        clock.t = k * 0.01
        bar("report", k, 50)
    assert tty.getvalue().count("\r") == 1  # only the first call within the second
    bar("report", 50, 50)
    assert "50/50" in _lines(tty)[-2]


def test_a_shorter_line_clears_the_longer_one():
    tty, clock = FakeTTY(), Clock()
    bar = TerminalProgress(tty, clock=clock, min_interval=0.0)
    bar("transfer", 0, 1000)
    long = tty.getvalue().split("\r")[-1]
    clock.t = 1.0
    bar("transfer", 1, 1000)
    last = tty.getvalue().split("\r")[-1]
    assert len(last) >= len(long)


def test_piped_stream_gets_nothing():
    piped = io.StringIO()  # isatty() is False
    progress = progress_for(piped)
    assert progress is no_progress
    progress("harmonise", 1, 3)
    assert piped.getvalue() == ""
    assert isinstance(progress_for(FakeTTY()), TerminalProgress)


def test_zero_total_draws_nothing():
    tty = FakeTTY()
    TerminalProgress(tty, min_interval=0.0)("summarise", 0, 0)
    assert tty.getvalue() == ""


# --- the command line, in a subprocess ------------------------------------------------------


@pytest.fixture(scope="module")
def small_demo(tmp_path_factory):
    from timeslice.demo import generate
    from timeslice.demo_config import render_demo_config

    data = tmp_path_factory.mktemp("progress_demo")
    generate(data, resolution=0.5)
    # one invented model keeps it short
    text = "\n".join(line for line in render_demo_config(".").splitlines()
                     if not line.startswith(("birch =", "cedar =")))
    cfg = data / "demo.toml"
    cfg.write_text(text)
    return cfg


def _cli(args, *, stderr_tty: bool, cwd):
    """Run ``python -m timeslice.cli ARGS``; stderr on a pseudo-terminal or a pipe."""
    env = {**os.environ, "COLUMNS": "100"}
    if not stderr_tty:
        return subprocess.run([sys.executable, "-m", "timeslice.cli", *args], cwd=cwd, env=env,
                              capture_output=True, text=True, timeout=600)
    import pty

    master, slave = pty.openpty()
    chunks: list[bytes] = []

    def drain():
        while True:
            try:
                data = os.read(master, 4096)
            except OSError:  # the other end closed
                return
            if not data:
                return
            chunks.append(data)

    reader = threading.Thread(target=drain, daemon=True)
    reader.start()
    try:
        proc = subprocess.run([sys.executable, "-m", "timeslice.cli", *args], cwd=cwd, env=env,
                              stdout=subprocess.PIPE, stderr=slave, text=True, timeout=600)
    finally:
        os.close(slave)
        reader.join(timeout=10)
        os.close(master)
    proc.stderr = b"".join(chunks).decode("utf-8", "replace")
    return proc


def test_fit_shows_progress_on_a_terminal_and_nothing_when_piped(small_demo, tmp_path):
    cwd = small_demo.parent
    piped = _cli(["fit", str(small_demo), "--out", str(tmp_path / "piped")],
                 stderr_tty=False, cwd=cwd)
    assert piped.returncode == 0, piped.stderr
    assert "\r" not in piped.stderr and "elapsed" not in piped.stderr, piped.stderr
    assert all(line.startswith("timeslice: warning: ") for line in piped.stderr.splitlines())
    # stdout holds the result lines only: one "  name  path" line per file written
    lines = piped.stdout.splitlines()
    assert lines and all(line.startswith("  ") for line in lines), piped.stdout
    assert any(line.split()[0] == "model" for line in lines)

    shown = _cli(["fit", str(small_demo), "--out", str(tmp_path / "tty"), "--force"],
                 stderr_tty=True, cwd=cwd)
    assert shown.returncode == 0, shown.stderr
    assert shown.stdout == piped.stdout.replace("piped", "tty")
    screen = [part.split("\r")[-1].strip() for part in shown.stderr.splitlines()]
    harmonise = [line for line in screen if line.startswith("harmonise")]
    assert harmonise and "1/1" in harmonise[-1] and "elapsed" in harmonise[-1], shown.stderr
    fit = [line for line in screen if line.startswith("fit ")]
    assert fit, shown.stderr
    done, total = fit[-1].split()[1].split("/")
    assert done == total and int(total) >= 2  # one step per cross-validation fold
