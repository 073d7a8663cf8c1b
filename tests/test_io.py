"""Atomic writes: nothing half-written, ordinary permissions."""

from __future__ import annotations

import os
import stat

import pytest

from timeslice.io import atomic_path


def test_atomic_success_and_mode(tmp_path):
    target = tmp_path / "out.txt"
    with atomic_path(target) as tmp:
        tmp.write_text("done")
        assert not target.exists()
    assert target.read_text() == "done"
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~umask
    assert list(tmp_path.iterdir()) == [target]


def test_atomic_failure_keeps_previous(tmp_path):
    target = tmp_path / "out.txt"
    target.write_text("old")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("boom")
    assert target.read_text() == "old"
    assert list(tmp_path.iterdir()) == [target]
