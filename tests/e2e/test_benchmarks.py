"""The benchmark scripts run at a tiny size and print their tables (not a timing test)."""

import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def run(script, *args, timeout=120):
    proc = subprocess.run([sys.executable, str(ROOT / "benchmarks" / script), *args],
                          capture_output=True, text=True, timeout=timeout, cwd=ROOT)
    assert proc.returncode == 0, proc.stderr[-2000:]
    return proc.stdout


@pytest.mark.slow
def test_solver_scaling_runs_tiny(tmp_path):
    import json

    out = run("solver_scaling.py", "--tiny", "--json", str(tmp_path / "rows.json"))
    assert "memory bandwidth" in out and "floor x" in out and "growth" in out
    assert "V mv" in out and "sp %" in out and "iter x" in out
    rows = json.loads((tmp_path / "rows.json").read_text())["rows"]
    assert len(rows) == 2
    for r in rows:
        assert "error" not in r
        assert r["unknowns"] > 0 and r["nonzeros"] > r["unknowns"]
        assert r["residual"] <= 1e-8 and r["iterations"] > 0
        assert r["peak_gb"] > 0
        # the V-cycle traffic model: more than the product alone, mostly single precision
        assert r["cycle_bytes"] > 0 and r["iteration_bytes"] > r["cycle_bytes"]
        assert 0.1 < r["single_share"] < 1.0
        d = r["direct"]                     # the direct solver ran on the same system
        assert "error" not in d and d["residual"] < 1e-10
        assert d["unknowns"] == r["free_unknowns"]


@pytest.mark.slow
def test_time_to_accuracy_runs_tiny():
    out = run("time_to_accuracy.py", "--tiny")
    assert "reference" in out and "centre err" in out
    assert out.count("\n    1 ") == 1 and out.count("\n    2 ") == 1


@pytest.mark.slow
def test_uncertainty_cost_runs_tiny(tmp_path):
    import json

    out = run("uncertainty_cost.py", "--tiny", "--json", str(tmp_path / "rows.json"), timeout=300)
    assert "ratio" in out and "mostly SiGe lattice law" in out
    row = json.loads((tmp_path / "rows.json").read_text())["rows"][0]
    assert row["plain"]["groups"] == []
    assert row["default"]["groups"] == ["Si C_ij", "SiGe C_ij", "SiGe lattice law",
                                        "Raman PDP set", "deformation potentials"]
    assert row["ratio"] > 0 and row["default"]["solves_s"] > 0
@pytest.mark.slow
def test_discretisation_cost_runs_tiny():
    out = run("discretisation_cost.py", "--tiny", timeout=300)
    assert "extra %" in out and "eta %" in out
    row = out.strip().splitlines()[-1].split()
    assert int(row[0].replace(",", "")) > 0
