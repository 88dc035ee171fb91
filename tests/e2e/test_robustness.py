"""Bad input, failures mid-run and interrupted runs: clear errors and nothing lost.

Every file in tests/data/bad/ is one class of invalid input (its first line says
which key must be named). Through the command line each must end in exactly
one line on stderr naming the file and the key, exit status 2, no traceback
and nothing written.
"""

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from mesastrain.cli.main import main
from small_cases import SMALL_MESA, as_from_a_terminal

HERE = Path(__file__).resolve().parents[1]
BAD = sorted((HERE / "data" / "bad").glob("*.toml"))
GOOD = HERE / "data" / "good_blanket.toml"

SMALL = SMALL_MESA


def expectation(path: Path):
    first = path.read_bytes().split(b"\n", 1)[0].decode("utf-8")
    key, fragment = (part.strip() for part in first[len("# expect:"):].split("|", 1))
    return key, fragment


@pytest.mark.parametrize("path", BAD, ids=[p.stem for p in BAD])
@pytest.mark.parametrize("command", ["run", "check"])
def test_every_bad_file_one_line_exit_2(path, command, tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    key, fragment = expectation(path)
    argv = [command, str(path)] + (["--out", str(tmp_path / "out")] if command == "run" else [])
    assert main(argv) == 2
    cap = capsys.readouterr()
    err = cap.err
    assert err.startswith("mesastrain: error: ") and err.endswith("\n") and err.count("\n") == 1
    assert "Traceback" not in err
    assert str(path) in err
    if key:
        assert f": {key}: " in err
    assert fragment in err
    assert list(tmp_path.iterdir()) == []          # nothing written anywhere


@pytest.fixture
def small(tmp_path):
    p = tmp_path / "small.toml"
    p.write_text(SMALL)
    return p


@pytest.mark.slow
def test_mesh_too_fine_refused_from_estimate(tmp_path, capsys):
    # a 10 pm element size on a 200 nm mesa: refused before anything is allocated
    p = tmp_path / "fine.toml"
    p.write_text(SMALL.replace("size = 25\nedge_size = 10", "size = 0.5\nedge_size = 0.5"))
    t = time.perf_counter()
    assert main(["run", str(p), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "mesh" in err and "GB" in err and err.count("\n") == 1
    assert time.perf_counter() - t < 30
    assert not (tmp_path / "o").exists()
    assert main(["check", str(p)]) == 2


def test_no_convergence_is_an_error_not_a_result(small, tmp_path, capsys):
    text = SMALL + '\n[solver]\nmethod = "iterative"\nmax_iterations = 2\ntolerance = 1e-10\n'
    small.write_text(text)
    assert main(["run", str(small), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "did not converge" in err and "max_iterations" in err
    assert not (tmp_path / "o").exists()


def test_floating_body_is_detected():
    # A body held nowhere: the direct solver must refuse rather than return garbage.
    import scipy.sparse as sp

    from mesastrain.errors import SolverError
    from mesastrain.fem.solve import solve_condensed
    # two springs in series, nothing held: singular
    K = sp.csr_matrix(np.array([[1.0, -1.0, 0.0], [-1.0, 2.0, -1.0], [0.0, -1.0, 1.0]]))
    f = np.array([1.0, 0.0, 0.0])
    with pytest.raises(SolverError, match="singular|converge|NaN"):
        solve_condensed(K, f, np.array([], dtype=int), method="direct")


def _without_timings(x):
    """Drop wall-clock entries (``seconds``, ``*_seconds``) at any depth: they are not results."""
    if isinstance(x, dict):
        return {k: _without_timings(v) for k, v in x.items()
                if k != "seconds" and not k.endswith("_seconds")}
    if isinstance(x, list):
        return [_without_timings(v) for v in x]
    return x


def _summary_numbers(path):
    s = json.loads(Path(path).read_text())
    s.pop("timings")
    for k in ("setup_time", "solve_time"):
        s["solver"].pop(k)
    return _without_timings(s)


@pytest.mark.slow
def test_determinism(small, tmp_path, small_mesa_run):
    # the same case gives identical summary.json numbers (timings aside) on the same machine;
    # run "a" is the session's run of SMALL_MESA (tests/conftest.py), run "b" a fresh one
    assert main(["run", str(small), "--out", str(tmp_path / "b"), "-q"]) == 0
    assert _summary_numbers(small_mesa_run.out / "summary.json") == \
        _summary_numbers(tmp_path / "b" / "summary.json")


def _start_run(case, out, overwrite=False):
    cmd = [sys.executable, "-m", "mesastrain", "run", str(case), "--out", str(out), "--progress"]
    if overwrite:
        cmd.append("--overwrite")
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=as_from_a_terminal)


def _wait_for(proc, word, timeout=120):
    """Read stderr lines until one contains ``word``."""
    t0 = time.time()
    seen = []
    while time.time() - t0 < timeout:
        line = proc.stderr.readline()
        if not line:
            break
        seen.append(line)
        if word in line:
            return
    proc.kill()
    raise AssertionError(f"never saw {word!r}: {seen}")


BIGGER = SMALL.replace("size = 25\nedge_size = 10", "size = 8\nedge_size = 3")


@pytest.mark.slow
@pytest.mark.parametrize("how", [signal.SIGINT, signal.SIGTERM, signal.SIGKILL])
def test_killed_mid_solve_leaves_no_partial_result(how, tmp_path):
    case = tmp_path / "c.toml"
    case.write_text(BIGGER)
    out = tmp_path / "res"
    proc = _start_run(case, out)
    _wait_for(proc, "assembly:")          # the solve has started
    proc.send_signal(how)
    proc.wait(timeout=60)
    if how != signal.SIGKILL:
        assert proc.returncode == 130
        assert "interrupted" in proc.stderr.read()
    assert not out.exists()
    assert [p.name for p in tmp_path.iterdir()] == ["c.toml"]


@pytest.mark.slow
def test_interrupted_overwrite_keeps_previous_result(tmp_path):
    case = tmp_path / "c.toml"
    case.write_text(BIGGER)
    out = tmp_path / "res"
    out.mkdir()
    previous = {"program": {"name": "mesastrain"}, "previous": True}   # a previous result
    (out / "summary.json").write_text(json.dumps(previous))
    proc = _start_run(case, out, overwrite=True)
    _wait_for(proc, "assembly:")
    proc.send_signal(signal.SIGINT)
    proc.wait(timeout=60)
    assert proc.returncode == 130
    assert json.loads((out / "summary.json").read_text()) == previous
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c.toml", "res"]
