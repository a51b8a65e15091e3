"""Atomic writes: a failed write leaves the old file, permissions follow the umask, bad folders
are one-line input errors."""

from __future__ import annotations

import os
import stat
from pathlib import Path

import pytest

from noiselab.common.atomic import atomic_path, write_text_atomic
from noiselab.common.errors import InputError


def test_write_replaces_and_leaves_no_temporary(tmp_path: Path) -> None:
    target = tmp_path / "out" / "a.json"
    write_text_atomic(target, "one")
    write_text_atomic(target, "two")
    assert target.read_text() == "two"
    assert sorted(p.name for p in target.parent.iterdir()) == ["a.json"]


def test_failed_write_keeps_the_previous_file(tmp_path: Path) -> None:
    target = tmp_path / "a.csv"
    write_text_atomic(target, "kept")
    with pytest.raises(RuntimeError), atomic_path(target) as tmp:
        tmp.write_text("half")
        raise RuntimeError("writer crashed")
    assert target.read_text() == "kept"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.csv"]


def test_permissions_follow_the_umask(tmp_path: Path) -> None:
    old = os.umask(0o022)
    try:
        path = write_text_atomic(tmp_path / "p.txt", "x")
    finally:
        os.umask(old)
    # an ordinary open() under umask 022 gives 0644 (POSIX, common practice)
    assert stat.S_IMODE(path.stat().st_mode) == 0o644


def test_unwritable_folder_is_an_input_error(tmp_path: Path) -> None:
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    with pytest.raises(InputError) as info:
        write_text_atomic(blocker / "sub" / "a.json", "x")
    message = str(info.value)
    assert "\n" not in message
    assert "a.json" in message and "cannot write" in message
