"""``mesastrain verify``: every row passes on this machine and names its source."""

import json

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
