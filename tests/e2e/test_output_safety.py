"""The result folder never costs the user a file: refusals before the solve, one run per
folder, atomic swaps, signals after gmsh, a full disk, the user's umask.

Every refusal asserts the exit status, one line on stderr naming ``--out`` (or the
file), and that nothing was written or lost (a snapshot of the folder tree).
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from mesastrain.cli.main import main
from mesastrain.io import destination
from mesastrain.io.destination import MARKER, is_result_folder
from small_cases import SMALL_MESA, as_from_a_terminal, sige_on_si

DISK = sige_on_si("small disk", 'shape = "disk"\ndiameter = "200 nm"',
                  "order = 1\nsize = 12\nedge_size = 5", substrate="2 um",
                  extra='[solver]\nmethod = "direct"\n')

#: SMALL_MESA without pictures and report (quicker to write).
QUICK_MESA = SMALL_MESA + """
[output]
report = false
[readouts]
bow = false
[device]
maps = false
"""

#: A mesa that takes a few seconds to solve (time to start a second run against it).
SLOWER_MESA = SMALL_MESA.replace("size = 25\nedge_size = 10", "size = 8\nedge_size = 3")


def snapshot(root: Path) -> dict:
    """Every path under ``root`` with its type and content hash (hidden files included)."""
    out = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for d in dirnames:
            out[os.path.relpath(os.path.join(dirpath, d), root)] = "dir"
        for f in filenames:
            p = os.path.join(dirpath, f)
            out[os.path.relpath(p, root)] = hashlib.sha256(Path(p).read_bytes()).hexdigest()
    return out


def one_line(err: str, *words: str) -> None:
    assert err.count("\n") == 1 and err.startswith("mesastrain: error: "), err
    assert "Traceback" not in err
    for w in words:
        assert w in err, err


@pytest.fixture
def no_solve(monkeypatch):
    """Any solve fails the test: the refusals must come before it."""
    import mesastrain.derived

    def refuse(*a, **k):
        raise AssertionError("solved although --out should have been refused")

    monkeypatch.setattr(mesastrain.derived, "solve_and_derive", refuse)


@pytest.fixture
def project(tmp_path):
    """tmp/proj/case.toml and tmp/proj/notes.txt; returns the case path."""
    proj = tmp_path / "proj"
    proj.mkdir()
    (proj / "notes.txt").write_text("my notes\n")
    case = proj / "case.toml"
    case.write_text(QUICK_MESA)
    return case


def refused(argv, root, capsys, *words):
    before = snapshot(root)
    assert main(argv) == 2
    one_line(capsys.readouterr().err, *words)
    assert snapshot(root) == before


# --------------------------------------------------------------------------
# --overwrite never destroys what is not a result
# --------------------------------------------------------------------------
def test_overwrite_refuses_a_user_file(project, tmp_path, capsys, no_solve):
    notes = project.parent / "notes.txt"
    refused(["run", str(project), "--out", str(notes), "--overwrite", "-q"], tmp_path, capsys,
            "--out", "is a file")
    refused(["run", str(project), "--out", str(notes), "-q"], tmp_path, capsys, "--out")
    assert notes.read_text() == "my notes\n"


def test_overwrite_refuses_the_case_folder_and_above(project, tmp_path, capsys, no_solve,
                                                     monkeypatch):
    monkeypatch.chdir(tmp_path)
    for out in (project.parent, tmp_path, Path("proj"), Path("proj/.."), Path("/")):
        refused(["run", str(project), "--out", str(out), "--overwrite", "-q"], tmp_path, capsys,
                "--out")
    # even when the case's folder looks like a previous result
    (project.parent / MARKER).write_text("{}")
    refused(["run", str(project), "--out", str(project.parent), "--overwrite"], tmp_path, capsys,
            "--out", "case.toml")
    assert project.read_text() == QUICK_MESA


def test_overwrite_refuses_the_working_directory_and_its_parent(project, tmp_path, capsys,
                                                                no_solve, monkeypatch):
    work = tmp_path / "work"
    work.mkdir()
    (work / "data.csv").write_text("1,2\n")
    monkeypatch.chdir(work)
    for out in (".", "", "../work", "..", str(work), f"{work}/"):
        refused(["run", str(project), "--out", out, "--overwrite", "-q"], tmp_path, capsys,
                "--out", "working directory")
    assert (work / "data.csv").read_text() == "1,2\n"


def test_overwrite_refuses_a_folder_that_is_not_a_result(project, tmp_path, capsys, no_solve):
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "thesis.tex").write_text("x")
    (mine / "summary.json").write_text('{"program": {"name": "something else"}}')
    refused(["run", str(project), "--out", str(mine), "--overwrite", "-q"], tmp_path, capsys,
            "--out", "not a mesastrain result")
    link = tmp_path / "link"
    link.symlink_to(mine)
    refused(["run", str(project), "--out", str(link), "--overwrite", "-q"], tmp_path, capsys,
            "--out", "symbolic link")


@pytest.mark.slow
def test_overwrite_replaces_a_previous_result_only(project, tmp_path, capsys):
    out = tmp_path / "res"
    assert main(["run", str(project), "--out", str(out), "-q"]) == 0
    assert is_result_folder(out) and (out / MARKER).is_file()
    (out / "stale.txt").write_text("old")
    assert main(["run", str(project), "--out", str(out), "--overwrite", "-q"]) == 0
    assert not (out / "stale.txt").exists() and (out / "summary.json").is_file()
    # no partial, old or lock files beside the result
    assert sorted(p.name for p in tmp_path.iterdir()) == ["proj", "res"]


# --------------------------------------------------------------------------
# output locations
# --------------------------------------------------------------------------
def test_unwritable_locations_are_refused_before_solving(project, tmp_path, capsys, no_solve):
    for out in ("/proc/mesastrain-test/res", "/proc/self/res", "/dev/null/res"):
        refused(["run", str(project), "--out", out, "-q"], tmp_path, capsys, "--out")
    assert not os.path.exists("/proc/mesastrain-test")


def _mount_tmpfs(where: Path, options: str) -> None:
    where.mkdir()
    if not hasattr(os, "geteuid") or os.geteuid() != 0 or shutil.which("mount") is None:
        pytest.skip("mounting a tmpfs needs root")
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(where)],
                       capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"mount not permitted here: {r.stderr.strip()}")


@pytest.fixture
def tmpfs(tmp_path):
    """Mount tmpfs file systems under tmp_path (skips where not permitted); unmounts after."""
    mounted = []

    def mount(name: str, options: str) -> Path:
        where = tmp_path / name
        _mount_tmpfs(where, options)
        mounted.append(where)
        return where

    yield mount
    for where in mounted:
        subprocess.run(["umount", str(where)], check=False)


def test_read_only_folder_is_refused_before_solving(project, tmp_path, capsys, no_solve, tmpfs):
    ro = tmpfs("ro", "ro,size=100k")
    refused(["run", str(project), "--out", str(ro / "res"), "-q"], tmp_path, capsys,
            "--out", "Read-only")
    refused(["run", str(project), "--out", str(ro / "a" / "b"), "-q"], tmp_path, capsys,
            "--out")


def test_read_only_folder_is_refused_without_root(project, tmp_path, capsys, no_solve):
    if os.geteuid() == 0:
        pytest.skip("root ignores folder permissions (the tmpfs test covers root)")
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        refused(["run", str(project), "--out", str(ro / "res"), "-q"], tmp_path, capsys, "--out")
    finally:
        ro.chmod(0o755)


@pytest.mark.slow
def test_full_disk_gives_one_line_and_leaves_nothing(project, tmp_path, capsys, tmpfs):
    small = tmpfs("small", "size=300k")
    previous = small / "res"
    previous.mkdir()
    (previous / "summary.json").write_text(json.dumps({"program": {"name": "mesastrain"},
                                                       "previous": True}))
    before = snapshot(small)
    # a new folder, and a replacement of the previous result: both hit ENOSPC
    for out, extra in ((small / "new", []), (previous, ["--overwrite"])):
        assert main(["run", str(project), "--out", str(out), "-q", *extra]) == 2
        err = capsys.readouterr().err
        one_line(err, "--out", "No space left on device")
        assert snapshot(small) == before
    assert json.loads((previous / "summary.json").read_text())["previous"] is True


@pytest.mark.slow
def test_result_folder_follows_the_umask(project, tmp_path):
    old = os.umask(0o027)
    try:
        assert main(["run", str(project), "--out", str(tmp_path / "res"), "-q"]) == 0
    finally:
        os.umask(old)
    assert (tmp_path / "res").stat().st_mode & 0o777 == 0o750
    assert (tmp_path / "res" / "summary.json").stat().st_mode & 0o777 == 0o640


@pytest.mark.slow
def test_write_error_is_one_line(project, tmp_path, capsys, monkeypatch):
    import mesastrain.io.folder as folder

    def broken(path, data):
        raise OSError(errno.EIO, "Input/output error", str(path))

    monkeypatch.setattr(folder, "write_json", broken)
    before = snapshot(tmp_path)
    assert main(["run", str(project), "--out", str(tmp_path / "res"), "-q"]) == 2
    one_line(capsys.readouterr().err, "--out", "Input/output error")
    assert snapshot(tmp_path) == before


@pytest.mark.slow
@pytest.mark.parametrize("where", ["write_vtu", "draw_pictures"])
def test_write_error_beside_the_pictures_is_one_line(project, tmp_path, capsys, monkeypatch,
                                                     where):
    # fields.vtu is written on a second thread while the pictures are drawn: a failure on
    # either side ends the run the same way (one line, nothing left), after the other
    # side has finished
    import mesastrain.io.folder as folder

    monkeypatch.setenv("MESASTRAIN_THREADS", "2")
    done = []

    def broken(*a, **k):
        raise OSError(errno.EIO, "Input/output error", "fields.vtu")

    def other(real):
        def run(*a, **k):
            time.sleep(0.2)                      # still busy when the failure comes
            done.append(real.__name__)
            return real(*a, **k)
        return run

    keep = "draw_pictures" if where == "write_vtu" else "write_vtu"
    monkeypatch.setattr(folder, where, broken)
    monkeypatch.setattr(folder, keep, other(getattr(folder, keep)))
    before = snapshot(tmp_path)
    assert main(["run", str(project), "--out", str(tmp_path / "res"), "-q"]) == 2
    one_line(capsys.readouterr().err, "--out", "Input/output error")
    assert snapshot(tmp_path) == before
    assert done == [keep]


# --------------------------------------------------------------------------
# the swap and the clean-up of stale partial folders
# --------------------------------------------------------------------------
def _previous_result(folder: Path) -> dict:
    folder.mkdir()
    (folder / MARKER).write_text("{}")
    (folder / "summary.json").write_text('{"old": 1}')
    return snapshot(folder)


@pytest.mark.parametrize("exchange", [True, False])
def test_failed_swap_restores_the_old_result(tmp_path, monkeypatch, exchange):
    out = tmp_path / "res"
    old = _previous_result(out)
    if not exchange:
        monkeypatch.setattr(destination, "_renameat2", None)
    else:
        if destination._renameat2 is None:
            pytest.skip("no renameat2 here")

        def failing(*a):
            import ctypes

            ctypes.set_errno(errno.EIO)
            return -1

        monkeypatch.setattr(destination, "_renameat2", failing)
    real_rename = os.rename

    def rename(src, dst):
        if Path(dst) == out and Path(src).name != "previous" and not exchange:
            raise OSError(errno.EIO, "simulated failure", str(dst))
        return real_rename(src, dst)

    monkeypatch.setattr(destination.os, "rename", rename)
    with pytest.raises(OSError):
        with destination.claim_output(out, overwrite=True) as dest:
            tmp = dest.partial()
            (tmp / "summary.json").write_text('{"new": 1}')
            dest.commit(tmp)
    assert snapshot(out) == old
    assert sorted(p.name for p in tmp_path.iterdir()) == ["res"]


def test_old_result_is_kept_when_it_cannot_be_put_back(tmp_path, monkeypatch):
    out = tmp_path / "res"
    old = _previous_result(out)
    monkeypatch.setattr(destination, "_renameat2", None)
    real_rename = os.rename

    def rename(src, dst):
        if Path(dst) == out:
            raise OSError(errno.EIO, "simulated failure", str(dst))
        return real_rename(src, dst)

    monkeypatch.setattr(destination.os, "rename", rename)
    with pytest.raises(destination.OutputError, match="previous result is kept in"):
        with destination.claim_output(out, overwrite=True) as dest:
            tmp = dest.partial()
            dest.commit(tmp)
    kept = [p for p in tmp_path.glob(".res.partial-*/previous")]
    assert len(kept) == 1 and snapshot(kept[0]) == old


def test_swap_replaces_with_no_stray_folders(tmp_path):
    out = tmp_path / "res"
    _previous_result(out)
    with destination.claim_output(out, overwrite=True) as dest:
        tmp = dest.partial()
        (tmp / "summary.json").write_text('{"new": 1}')
        dest.commit(tmp)
    assert json.loads((out / "summary.json").read_text()) == {"new": 1}
    assert (out / MARKER).is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["res"]


def test_stale_partials_of_dead_owners_only_are_removed(tmp_path):
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    host = destination._host()
    names = {
        "dead": f".res.partial-{host}-{dead.pid}.0-0123abcd",
        "live": f".res.partial-{host}-{os.getpid()}.{destination._start_time(os.getpid())}"
                f"-0123abce",
        "foreign": f".res.partial-elsewhere.example-{dead.pid}.0-0123abcf",
        "other": f".resx.partial-{host}-{dead.pid}.0-0123abd0",
        "user": ".res.partial-my-own-folder",
    }
    for n in names.values():
        (tmp_path / n).mkdir()
        (tmp_path / n / "f").write_text("x")
    with destination.claim_output(tmp_path / "res"):
        pass
    left = {p.name for p in tmp_path.iterdir()}
    assert names["dead"] not in left
    assert left == {names[k] for k in ("live", "foreign", "other", "user")}


# --------------------------------------------------------------------------
# subprocesses: two runs at once, signals after gmsh
# --------------------------------------------------------------------------
def _start(case, out, *extra):
    cmd = [sys.executable, "-m", "mesastrain", "run", str(case), "--out", str(out),
           "--progress", *extra]
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env=dict(os.environ), preexec_fn=as_from_a_terminal)


def _wait_for(proc, word, timeout=120):
    t0, seen = time.time(), []
    while time.time() - t0 < timeout:
        line = proc.stderr.readline()
        if not line:
            break
        seen.append(line)
        if word in line:
            return
    proc.kill()
    raise AssertionError(f"never saw {word!r}: {seen}")


@pytest.mark.slow
def test_second_run_to_the_same_folder_fails_at_once(tmp_path):
    case = tmp_path / "c.toml"
    case.write_text(SLOWER_MESA)
    out = tmp_path / "res"
    first = _start(case, out)
    _wait_for(first, "mesh:")                 # the first run holds the folder
    t0 = time.time()
    second = subprocess.run([sys.executable, "-m", "mesastrain", "run", str(case), "--out",
                             str(out), "-q"], capture_output=True, text=True, timeout=120,
                            env=dict(os.environ))
    assert second.returncode == 2
    one_line(second.stderr, "--out", "another mesastrain run")
    assert time.time() - t0 < 60
    first.communicate(timeout=300)
    assert first.returncode == 0
    assert is_result_folder(out) and (out / "fields.vtu").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c.toml", "res"]


@pytest.mark.slow
@pytest.mark.parametrize("when", ["assembly:", "case "])
@pytest.mark.parametrize("how", [signal.SIGTERM, signal.SIGINT])
def test_signal_after_a_gmsh_shape_ends_cleanly(tmp_path, how, when):
    case = tmp_path / "disk.toml"
    case.write_text(DISK)
    out = tmp_path / "res"
    proc = _start(case, out)
    _wait_for(proc, when)                     # "case ": while gmsh meshes
    proc.send_signal(how)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    one_line(err, "interrupted")
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["disk.toml"]


@pytest.mark.slow
def test_signal_after_gmsh_keeps_the_previous_result(tmp_path):
    case = tmp_path / "disk.toml"
    case.write_text(DISK)
    out = tmp_path / "res"
    old = _previous_result(out)
    proc = _start(case, out, "--overwrite")
    _wait_for(proc, "assembly:")
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    one_line(err, "interrupted")
    assert snapshot(out) == old
    assert sorted(p.name for p in tmp_path.iterdir()) == ["disk.toml", "res"]


def test_a_newline_in_out_stays_on_one_line(project, tmp_path, capsys, no_solve):
    odd = tmp_path / "a\nmesastrain: error: forged"
    odd.write_text("user file")
    refused(["run", str(project), "--out", str(odd), "--overwrite", "-q"], tmp_path, capsys,
            "--out", "\\n")


def test_lock_files_left_by_killed_runs_are_swept(tmp_path):
    out = tmp_path / "res"
    lock = destination._lock_path(tmp_path, "res")
    if not lock.parent.name.startswith("mesastrain-locks"):
        pytest.skip("no private lock folder here")
    left = lock.parent / "0123456789abcdef0123456789abcdef.lock"
    left.write_text("pid 1 on elsewhere")        # nobody holds it
    with destination.claim_output(out) as dest:
        assert dest._lock_path == lock and lock.exists()
        assert not left.exists()
        # a second claim of the same folder fails at once, naming --out
        with pytest.raises(destination.OutputError, match="--out: .*another mesastrain run"):
            with destination.claim_output(out):
                pass
    assert not lock.exists()
    assert list(tmp_path.iterdir()) == []
