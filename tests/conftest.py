"""Session-scoped fixtures shared by the unit and end-to-end tests.

A solved case is expensive next to the checks that read it, so the cases several test modules
share are solved (or run through the command line) once per session. These fixtures hand out
results that tests only read: a test that changes a case, its result or its folder builds its
own.

Markers: ``slow`` (set on a test or module) marks tests that solve bigger models, run Dask,
spawn subprocesses, send signals or take more than about a second; ``pytest -m "not slow"`` is
the inner loop, ``pytest -m slow`` runs the rest.
"""

import contextlib
import io
import os
from dataclasses import dataclass
from pathlib import Path

import pytest

from small_cases import SMALL_MESA

# pytest-xdist already runs one test process per core: the derived-quantity providers of
# each run then take one thread (tests/unit/run/test_providers.py runs them on two)
if os.environ.get("PYTEST_XDIST_WORKER"):
    os.environ.setdefault("MESASTRAIN_THREADS", "1")


@dataclass(frozen=True)
class CliRun:
    """One ``mesastrain run`` of a case file: where it ran and what it printed."""

    root: Path       #: the folder holding the case file and the result folder, nothing else
    case: Path       #: the case file
    out: Path        #: the result folder (summary.json, fields.vtu, report, pictures)
    stdout: str      #: what the command printed on stdout


@pytest.fixture(scope="session")
def small_mesa_toml(tmp_path_factory) -> Path:
    """SMALL_MESA (tests/small_cases.py) written once to a case file. Do not edit it."""
    p = tmp_path_factory.mktemp("small_mesa_case") / "small.toml"
    p.write_text(SMALL_MESA)
    return p


@pytest.fixture(scope="session")
def small_mesa_case(small_mesa_toml):
    """SMALL_MESA parsed once (a frozen Case)."""
    from mesastrain.case.parse import load_case

    return load_case(small_mesa_toml)


@pytest.fixture(scope="session")
def small_mesa_result(small_mesa_case):
    """SMALL_MESA solved once, with every derived quantity (``solve_and_derive``)."""
    from mesastrain.derived import solve_and_derive

    return solve_and_derive(small_mesa_case)


@pytest.fixture(scope="session")
def small_mesa_run(tmp_path_factory) -> CliRun:
    """``mesastrain run small.toml --out res`` once, in a folder of its own.

    The folder holds only ``small.toml`` and ``res/``, so a test can check that the run left
    nothing else behind. Read it; never write into it.
    """
    from mesastrain.cli.main import main

    root = tmp_path_factory.mktemp("small_mesa_run")
    case = root / "small.toml"
    case.write_text(SMALL_MESA)
    out = root / "res"
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = main(["run", str(case), "--out", str(out)])
    assert rc == 0, buf.getvalue()
    return CliRun(root=root, case=case, out=out, stdout=buf.getvalue())
