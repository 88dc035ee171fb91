"""``mesastrain verify``: every row passes on this machine and names its source."""

import json

import numpy as np
import pytest

from mesastrain.cli import verify
from mesastrain.cli.main import main


@pytest.fixture(scope="module")
def rows():
    return verify.run_checks()


@pytest.mark.slow
def test_every_check_passes_and_has_a_source(rows):
    assert len(rows) >= 15
    for r in rows:
        assert r.passed, (r.quantity, r.published, r.computed, r.error)
        # a source names authors or a publication with a year, or says "common practice"
        assert r.source and (any(ch.isdigit() for ch in r.source)
                             or "common practice" in r.source), r.quantity


@pytest.mark.slow
def test_the_groups_the_issue_names_are_there(rows):
    text = " ".join(r.source for r in rows)
    for who in ("Stoney", "Timoshenko", "Eshelby", "Matthews", "People", "Brantley",
                "Hirth", "common practice"):
        assert who in text, who


@pytest.mark.slow
def test_table_lists_source_computed_and_error(rows):
    table = verify.format_table(rows)
    blocks = table.split("\n")
    assert sum("published" in b for b in blocks) == len(rows)
    assert sum("PASS" in b for b in blocks) == len(rows)
    for r in rows:
        assert f"[{r.source}]" in table


def test_command_exit_status_and_json(monkeypatch, capsys):
    ok = verify.Check("one", 1.0, "a source, 2024", 1.0001, 1e-3)
    bad = verify.Check("two", 1.0, "another source, 2024", 1.5, 1e-3)
    monkeypatch.setattr(verify, "CHECKS", [lambda: [ok]])
    assert main(["verify"]) == 0
    out = capsys.readouterr().out
    assert "1 of 1 checks passed" in out and "[a source, 2024]" in out
    monkeypatch.setattr(verify, "CHECKS", [lambda: [ok, bad]])
    assert main(["verify", "--json"]) == 1
    data = json.loads(capsys.readouterr().out)
    assert [d["passed"] for d in data] == [True, False]
    assert all(d["source"] for d in data)


def test_json_on_real_rows(capsys):
    # The real rows carry numpy values (passed came back as numpy.bool_ and broke json.dumps).
    assert main(["verify", "--only", "raman", "rotation", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert len(data) == 4 and all(d["passed"] is True for d in data)
    assert all(isinstance(d["computed"], float) for d in data)
    row = verify.Check("np", np.float32(1.0), "a source, 2024", np.float32(1.0), 1e-3)
    assert type(row.passed) is bool


def test_raman_rows():
    # (001): -434 MPa per cm^-1 (De Wolf 1996, from memory); (110) along [1-10]: the observable
    # line of the two allowed modes (Loudon 1964 selection rules), not the forbidden normal mode
    # (which would give 1000/-0.556 = -1800).
    rows = verify.check_raman()
    assert [r.passed for r in rows] == [True, True]
    assert rows[0].computed == pytest.approx(-434.0, rel=0.01)
    assert rows[1].computed == pytest.approx(-372.1, abs=0.5)
    assert "implementation check" in rows[1].quantity


def test_rows_say_whether_they_validate_or_check_the_implementation(capsys):
    # rows that evaluate a formula with the tool's own inputs are marked, in the table and JSON
    assert main(["verify", "--only", "critical_thickness", "bow", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    kinds = {d["quantity"]: d["kind"] for d in data}
    assert set(kinds.values()) == {"validation", "implementation"}
    assert all(k == "implementation" for q, k in kinds.items() if "h_c" in q)
    assert kinds[next(q for q in kinds if q.startswith("signed wafer curvature"))] == "validation"
    table = verify.format_table(verify.check_critical_thickness())
    assert table.count("[implementation check]") == 4


def _flip_misfit(monkeypatch):
    """A plausible bug: the misfit eigenstrain with the wrong sign, everywhere it is built."""
    import mesastrain.model.regions as regions

    real = regions.build_layers

    def flipped(case):
        from dataclasses import replace
        out = real(case)
        return [out[0]] + [replace(lm, eigenstrain_sample=-lm.eigenstrain_sample,
                                   eigenstrain_crystal=-lm.eigenstrain_crystal)
                           for lm in out[1:]]
    for mod in ("mesastrain.model.regions", "mesastrain.run.pipeline",
                "mesastrain.mesh.planning", "mesastrain.cli.verify"):
        m = __import__(mod, fromlist=["x"])
        if hasattr(m, "build_layers"):
            monkeypatch.setattr(m, "build_layers", flipped)
    monkeypatch.setattr(regions, "build_layers", flipped)


@pytest.mark.slow
def test_a_flipped_misfit_sign_fails_a_signed_row(monkeypatch):
    # The issue's audit: a flipped misfit sign passed all 11 rows of these groups. The signed
    # rows (SiGe on Si(001) compressive, -1.2 to -1.55 GPa; the Stoney curvature of a
    # compressive film, film side convex) must now fail, while the implementation checks,
    # which share the sign with the model, still pass.
    before = verify.run_checks(["blanket", "bow"])
    assert all(r.passed for r in before)
    _flip_misfit(monkeypatch)
    rows = verify.run_checks(["blanket", "bow"])
    failed = [r.quantity for r in rows if not r.passed]
    assert any("signed film stress" in q for q in failed), failed
    assert any("signed wafer curvature" in q for q in failed), failed
    assert all(r.kind == "validation" for r in rows if not r.passed)
