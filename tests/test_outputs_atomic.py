"""A set of output files is published all or nothing (issue 14).

``OutputSet.commit`` renames several temporary files into place. Before
issue 14 a rename failing midway left new files beside old ones (a stale
manifest), and temporary files behind. Here every rename is made to fail in
turn (fault injection on ``os.replace``), with and without old files at the
targets, and the folder must afterwards hold exactly the old files with their
old contents, and nothing else. Common practice: the backup-and-roll-back way
of making a multi-file update atomic.
"""

from __future__ import annotations

import os

import pytest

import seqdist.io.matrices as sio
from seqdist import InputError
from seqdist.io.matrices import OutputSet

NAMES = ("a.tsv", "b.json", "c.txt")


def _folder(path) -> dict:
    """Every entry of a folder (hidden ones too) with its text."""
    return {name: (path / name).read_text() for name in sorted(os.listdir(path))}


class _Fault:
    """os.replace that raises ``exc`` on call number ``at`` (1-based) and works otherwise."""

    def __init__(self, at: int, exc: BaseException):
        self.at, self.exc, self.calls = at, exc, 0
        self.real = os.replace

    def __call__(self, src, dst, *a, **k):
        self.calls += 1
        if self.calls == self.at:
            raise self.exc
        return self.real(src, dst, *a, **k)


def _stage(folder) -> OutputSet:
    out = OutputSet()
    for k, name in enumerate(NAMES):
        out.add_text(str(folder / name), f"new {k}\n")
    return out


def _count_replaces(tmp_path, old: bool) -> int:
    """How many renames a successful commit of the 3-file set makes (3, or 6 with old files)."""
    folder = tmp_path / "count"
    folder.mkdir()
    if old:
        for name in NAMES:
            (folder / name).write_text("x\n")
    counter = _Fault(at=0, exc=OSError())
    real, sio.os.replace = os.replace, counter
    try:
        _stage(folder).commit()
    finally:
        sio.os.replace = real
    assert _folder(folder) == {name: f"new {k}\n" for k, name in enumerate(NAMES)}
    return counter.calls


@pytest.mark.parametrize("old", [False, True], ids=["no-old-files", "old-files"])
@pytest.mark.parametrize("exc", [OSError(28, "No space left on device"), KeyboardInterrupt()],
                         ids=["oserror", "interrupt"])
def test_commit_failing_at_any_rename_leaves_the_old_set(tmp_path, monkeypatch, old, exc):
    calls = _count_replaces(tmp_path, old)
    assert calls == (6 if old else 3)
    for at in range(1, calls + 1):
        folder = tmp_path / f"{'old' if old else 'none'}-{at}"
        folder.mkdir()
        if old:
            for name in NAMES:
                (folder / name).write_text(f"old {name}\n")
        before = _folder(folder)
        out = _stage(folder)
        fault = _Fault(at, exc)
        monkeypatch.setattr(sio.os, "replace", fault)
        expected = InputError if isinstance(exc, OSError) else KeyboardInterrupt
        with pytest.raises(expected) as info:
            out.commit()
        monkeypatch.undo()
        assert fault.calls >= at
        assert _folder(folder) == before, f"rename {at} of {calls}"
        if expected is InputError:
            msg = str(info.value)
            assert "cannot write (No space left on device); no output file was changed" in msg
            assert "\n" not in msg


def test_partial_staging_interrupted_leaves_nothing(tmp_path, monkeypatch):
    """An interrupt while a file is being staged removes the temporary files already made."""
    (tmp_path / "a.tsv").write_text("old\n")
    real_chmod = os.chmod
    calls = {"n": 0}

    def chmod(path, mode, *a, **k):
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt
        return real_chmod(path, mode, *a, **k)

    monkeypatch.setattr(sio.os, "chmod", chmod)
    with pytest.raises(KeyboardInterrupt):
        with OutputSet() as out:
            out.add_text(str(tmp_path / "a.tsv"), "new\n")
            out.add_text(str(tmp_path / "b.tsv"), "new\n")
    assert _folder(tmp_path) == {"a.tsv": "old\n"}


def test_write_failure_while_staging_is_one_line(tmp_path, monkeypatch):
    def fdopen(*a, **k):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(sio.os, "fdopen", fdopen)
    with pytest.raises(InputError, match=r"a\.tsv: cannot write \(No space left on device\)"):
        with OutputSet() as out:
            out.add_text(str(tmp_path / "a.tsv"), "new\n")
    assert os.listdir(tmp_path) == []


def test_successful_commit_replaces_old_files_and_leaves_no_backup(tmp_path):
    for name in NAMES:
        (tmp_path / name).write_text("old\n")
    _stage(tmp_path).commit()
    assert _folder(tmp_path) == {name: f"new {k}\n" for k, name in enumerate(NAMES)}
