"""Design sweeps: sweep files, case expansion, hashing, figures, and runs on Dask.

The Dask tests use only loopback addresses and leave no process behind: the
embedded cluster is closed by the sweep itself, the separately started
``dask scheduler`` / ``dask worker`` are their own process groups, ended in the
fixture's teardown, and every test that starts workers checks that none is
left. Cases use a coarse mesh (set in the sweep's ``[set]`` table) so that
each solves in a few seconds.
"""

import json
import os
import re
import signal
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import numpy as np
import pytest

from mesastrain.case.parse import parse_case
from mesastrain.cli.main import main
from mesastrain.cli.sweep.driver import run_sweep
from mesastrain.cli.sweep.expand import case_hash, expand
from mesastrain.cli.sweep.figures import figure_unit, figure_value
from mesastrain.cli.sweep.spec import load_sweep, parse_path, parse_sweep
from mesastrain.cli.sweep.store import CASE_RECORD, LOG_JSONL, META_JSON, TABLE_CSV, CaseOutcome
from mesastrain.cli.sweep.tables import plot_sweep, summary_text
from mesastrain.errors import CaseError
from mesastrain.physics.materials import get_material

ROOT = Path(__file__).resolve().parents[2]
DEMO_SWEEP = ROOT / "cases" / "sweep_mesa_width.toml"
DEMO_BASE = ROOT / "cases" / "mesa_width_base.toml"

#: Coarser than the demo so that each case solves in a few seconds on a busy machine.
COARSE = {"mesh.edge_size": 15, "mesh.growth": 2.0, "readouts.bow": False}

SMALL_BASE = {
    "title": "small mesa",
    "substrate": {"material": "Si", "thickness": "50 um", "normal": [0, 0, 1],
                  "x_axis": [1, 1, 0]},
    "layer": [{"material": "SiGe", "x": 0.2, "thickness": "20 nm"}],
    "pattern": {"shape": "rectangle", "width": "200 nm", "etch_depth": "30 nm"},
    "mesh": {"order": 1, "size": 50, "edge_size": 10},
    "probe": [{"name": "centre", "at": [0, 0, 10]}],
}


def _sweep(**kw):
    d = {"base": "small.toml", "vary": [{"key": "pattern.width", "values": [200, 300]}]}
    d.update(kw)
    return d


# --------------------------------------------------------------------------
# processes: nothing may outlive a test
# --------------------------------------------------------------------------
def _spawned_children() -> list[int]:
    """Pids of multiprocessing-spawned children of this process (Dask worker processes)."""
    me = os.getpid()
    out = []
    for d in Path("/proc").glob("[0-9]*"):
        try:
            fields = (d / "stat").read_text().rsplit(")", 1)[1].split()
            if int(fields[1]) != me:
                continue
            if b"spawn_main" in (d / "cmdline").read_bytes():
                out.append(int(d.name))
        except (OSError, IndexError, ValueError):
            continue
    return out


def _wait_no_children(timeout=20.0):
    if not Path("/proc").is_dir():
        return
    t0 = time.monotonic()
    while _spawned_children() and time.monotonic() - t0 < timeout:
        time.sleep(0.2)
    assert _spawned_children() == [], "Dask worker processes outlived the sweep"


def _group_alive(pgid: int) -> bool:
    try:
        os.killpg(pgid, 0)
        return True
    except ProcessLookupError:
        return False
    except PermissionError:
        return True


def _end_group(proc: subprocess.Popen, timeout=20.0) -> None:
    """Terminate a process group started with start_new_session=True, then kill it."""
    pgid = proc.pid
    for sig in (signal.SIGTERM, signal.SIGKILL):
        if not _group_alive(pgid):
            break
        try:
            os.killpg(pgid, sig)
        except ProcessLookupError:
            break
        t0 = time.monotonic()
        while _group_alive(pgid) and time.monotonic() - t0 < timeout:
            if proc.poll() is None:
                try:
                    proc.wait(timeout=0.2)
                except subprocess.TimeoutExpired:
                    pass
            else:
                time.sleep(0.2)
    if proc.poll() is None:
        proc.wait(timeout=5)


def _dask_cli(sub: str) -> list[str]:
    exe = Path(sys.executable).with_name("dask")
    if exe.exists():
        return [str(exe), sub]
    return [sys.executable, "-m", f"distributed.cli.dask_{sub}"]


@pytest.fixture(scope="module")
def dask_cluster(tmp_path_factory):
    """A separately started `dask scheduler` and one `dask worker` on 127.0.0.1."""
    d = tmp_path_factory.mktemp("dask")
    sched_file = d / "scheduler.json"
    env = dict(os.environ)
    procs = []
    try:
        procs.append(subprocess.Popen(
            _dask_cli("scheduler") + ["--host", "127.0.0.1", "--port", "0", "--no-dashboard",
                                      "--dashboard-address", "127.0.0.1:0",
                                      "--scheduler-file", str(sched_file),
                                      "--idle-timeout", "600"],
            stdout=subprocess.DEVNULL, stderr=open(d / "scheduler.log", "w"), env=env,
            start_new_session=True))
        t0 = time.monotonic()
        while not sched_file.exists() and time.monotonic() - t0 < 60:
            assert procs[0].poll() is None, (d / "scheduler.log").read_text()
            time.sleep(0.1)
        address = json.loads(sched_file.read_text())["address"]
        assert address.startswith("tcp://127.0.0.1:")
        procs.append(subprocess.Popen(
            _dask_cli("worker") + [address, "--host", "127.0.0.1", "--nworkers", "1",
                                   "--nthreads", "1", "--no-dashboard",
                                   "--dashboard-address", "127.0.0.1:0",
                                   "--memory-limit", "2GiB", "--death-timeout", "60"],
            stdout=subprocess.DEVNULL, stderr=open(d / "worker.log", "w"), env=env,
            start_new_session=True))
        yield address
    finally:
        for p in reversed(procs):
            _end_group(p)
        for p in procs:
            assert not _group_alive(p.pid), "a dask process outlived the test"


# --------------------------------------------------------------------------
# sweep files
# --------------------------------------------------------------------------
def test_key_paths():
    assert parse_path("pattern.width", "k") == ("pattern", "width")
    assert parse_path("layer[0].x", "k") == ("layer", 0, "x")
    assert parse_path("probe[1].at[2]", "k") == ("probe", 1, "at", 2)
    assert parse_path("readouts.layers[1].relaxation.+x.length", "k")[-2:] == ("+x", "length")
    for bad in ("", "a..b", ".a", "a.", "[0].a", "a[x]", "layer [0]", 3):
        with pytest.raises(CaseError) as e:
            parse_path(bad, "vary[0].key")
        assert e.value.key == "vary[0].key" and "\n" not in str(e.value)


@pytest.mark.parametrize("patch, key, text", [
    ({"varry": []}, "varry", 'did you mean "vary"'),
    ({"combine": "cross"}, "combine", '"grid"'),
    ({"vary": [{"values": [1]}]}, "vary[0].key", "required key is missing"),
    ({"vary": [{"key": "pattern.widht", "values": [100]}]}, "vary[0].key",
     'did you mean "width"'),
    ({"vary": [{"key": "patern.width", "values": [100]}]}, "vary[0].key",
     'did you mean "pattern"'),
    ({"vary": [{"key": "layer[3].x", "values": [0.1]}]}, "vary[0].key", "has 1 item(s)"),
    ({"vary": [{"key": "pattern.width", "values": [1], "from": 1, "to": 2, "count": 2}]},
     "vary[0].values", "not both"),
    ({"vary": [{"key": "pattern.width", "values": []}]}, "vary[0].values", "non-empty"),
    ({"vary": [{"key": "pattern.width", "from": 0, "to": 5, "count": 3, "spacing": "log"}]},
     "vary[0].from", "> 0"),
    ({"vary": [{"key": "pattern.width", "from": 1, "to": 5, "count": 0}]}, "vary[0].count",
     ">= 1"),
    ({"vary": [{"key": "pattern.width", "from": 1, "to": 5}]}, "vary[0].count",
     "exactly one of count"),
    ({"vary": [{"key": "pattern.width", "from": "1 um", "to": 5, "count": 2}]}, "vary[0].to",
     "same kind"),
    ({"vary": [{"key": "pattern.width", "values": [1, 2]},
               {"key": "pattern.width", "values": [3, 4]}]}, "vary[1].key", "already varied"),
    ({"combine": "zip", "vary": [{"key": "pattern.width", "values": [100, 200]},
                                 {"key": "layer[0].x", "values": [0.1]}]}, "vary[1]",
     "same count"),
    ({"collect": {"figures": ["probes..x"]}}, "collect.figures[0]", "not a key path"),
    ({"collect": {"figure": []}}, "collect.figure", 'did you mean "figures"'),
    ({"set": {"layer[2].x": 0.1}}, "set.layer[2].x", "has 1 item(s)"),
])
def test_sweep_file_errors_name_the_key(patch, key, text):
    with pytest.raises(CaseError) as e:
        parse_sweep(_sweep(**patch), base=SMALL_BASE)
    assert e.value.key == key, str(e.value)
    assert text in e.value.message and "\n" not in str(e.value)


def test_load_sweep_names_the_file(tmp_path):
    f = tmp_path / "s.toml"
    f.write_text('base = "nowhere.toml"\n[[vary]]\nkey = "pattern.width"\nvalues = [1]\n')
    with pytest.raises(CaseError) as e:
        load_sweep(f)
    assert str(e.value).startswith(f"{f}: base: ") and "no such case file" in str(e.value)
    f.write_text("base = [\n")
    with pytest.raises(CaseError, match="TOML syntax error"):
        load_sweep(f)


def test_ranges():
    def values(**t):
        return parse_sweep(_sweep(vary=[{"key": "pattern.width", **t}]),
                           base=SMALL_BASE).axes[0].values

    assert values(**{"from": 100, "to": 300, "step": 100}) == (100, 200, 300)
    assert values(**{"from": 300, "to": 100, "step": 100}) == (300, 200, 100)
    assert values(**{"from": 0.1, "to": 0.3, "step": 0.1}) == (0.1, 0.2, 0.3)
    assert values(**{"from": "0.1 um", "to": "0.5 um", "count": 3}) == (100.0, 300.0, 500.0)
    log = np.array(values(**{"from": "0.1 um", "to": "5 um", "count": 6, "spacing": "log"}))
    assert log[0] == 100.0 and log[-1] == 5000.0
    assert np.allclose(log[1:] / log[:-1], 50 ** 0.2, rtol=1e-10)
    temps = parse_sweep(_sweep(vary=[{"key": "thermal.growth_temperature", "from": "500 C",
                                      "to": "700 C", "step": 100}],
                               set={"thermal.final_temperature": "20 C"}),
                        base=SMALL_BASE).axes[0].values
    assert temps == ("773.15 K", "873.15 K", "973.15 K")


def test_grid_zip_and_set():
    sw = parse_sweep(_sweep(vary=[{"key": "pattern.width", "values": ["0.2 um", 300, 400]},
                                  {"key": "layer[0].x", "values": [0.1, 0.2]}],
                            set={"mesh": {"size": 40}, "pattern.etch_depth": "25 nm"}),
                     base=SMALL_BASE)
    cases = expand(sw)
    assert len(cases) == 6
    # the last [[vary]] changes fastest
    assert [dict(c.params)["layer[0].x"] for c in cases] == [0.1, 0.2] * 3
    assert [c.case.pattern.width for c in cases] == [200.0, 200.0, 300.0, 300.0, 400.0, 400.0]
    assert all(c.case.mesh.size == 40 and c.case.pattern.etch_depth == 25 for c in cases)
    assert len({c.hash for c in cases}) == 6
    assert cases[0].resolved() == {"pattern.width": 200.0, "layer[0].x": 0.1}
    zipped = expand(parse_sweep(_sweep(combine="zip", vary=[
        {"key": "pattern.width", "values": [200, 300]},
        {"key": "layer[0].x", "values": [0.1, 0.2]}]), base=SMALL_BASE))
    assert [(c.case.pattern.width, c.case.layers[0].x) for c in zipped] == [(200, 0.1),
                                                                           (300, 0.2)]


def test_invalid_value_is_a_failed_case_not_an_error():
    cases = expand(parse_sweep(_sweep(vary=[{"key": "pattern.width",
                                             "values": [200, "-5 nm", "wide"]}]),
                               base=SMALL_BASE))
    assert cases[0].case is not None
    assert cases[1].case is None and cases[1].error.startswith("pattern.width: must be > 0")
    assert cases[2].case is None and cases[2].error.startswith("pattern.width:")
    assert cases[1].hash != cases[2].hash


@pytest.mark.slow
def test_case_hash_is_stable_and_specific():
    a = dict(SMALL_BASE, pattern=dict(SMALL_BASE["pattern"], width="0.2 um"))
    b = dict(SMALL_BASE, pattern=dict(SMALL_BASE["pattern"], width=200), title="other title")
    c = dict(SMALL_BASE, pattern=dict(SMALL_BASE["pattern"], width=201))
    ha, hb, hc = (case_hash(parse_case(d)) for d in (a, b, c))
    assert re.fullmatch(r"[0-9a-f]{16}", ha)
    assert ha == hb            # same resolved case, other spelling and title
    assert ha != hc
    # the same in a fresh interpreter with another string-hash seed
    code = ("import json,sys; from mesastrain.case.parse import parse_case; "
            "from mesastrain.cli.sweep.expand import case_hash; "
            "print(case_hash(parse_case(json.loads(sys.argv[1]))))")
    out = subprocess.run([sys.executable, "-c", code, json.dumps(a)], capture_output=True,
                         text=True, env=dict(os.environ, PYTHONHASHSEED="12345"), timeout=120)
    assert out.stdout.strip() == ha, out.stderr


# --------------------------------------------------------------------------
# figures
# --------------------------------------------------------------------------
SUMMARY = {
    "units": {"length": "nm", "stress": "MPa", "strain": "1"},
    "probes": [{"name": "centre", "stress": [[-1.0, 2.0, 3.0], [2.0, -4.0, 5.0],
                                             [3.0, 5.0, 6.0]],
                "displacement": [0.1, 0.2, 0.3], "von_mises": 9.5}],
    "layer_figures": {"substrate": {"mean_stress": [[1, 0, 0], [0, 1, 0], [0, 0, 0]]},
                      "SiGe": {"mean_stress": [[7, 0, 0], [0, 8, 0], [0, 0, 0]]}},
    "readouts": {"units": {"length": "nm"},
                 "layers": {"SiGe": {"relaxation": {"+x": {"length": 26.5}},
                                     "centre_over_blanket": {"xx": 0.2}, "missing": None,
                                     "exceeds": True}}},
}


def test_figure_paths():
    assert figure_value(SUMMARY, "probes.centre.stress.xx") == -1.0
    assert figure_value(SUMMARY, "probes[0].stress.yz") == 5.0
    assert figure_value(SUMMARY, "probes.centre.stress.zx") == 3.0
    assert figure_value(SUMMARY, "probes.centre.displacement.z") == 0.3
    assert figure_value(SUMMARY, "layer_figures.SiGe.mean_stress.yy") == 8.0
    assert figure_value(SUMMARY, "layer_figures.substrate.mean_stress.xx") == 1.0
    assert figure_value(SUMMARY, "readouts.layers.SiGe.relaxation.+x.length") == 26.5
    assert figure_value(SUMMARY, "readouts.layers.SiGe.missing") is None
    assert figure_value(SUMMARY, "readouts.layers.SiGe.exceeds") == 1.0
    for path, text in (("probes.centre.stress", "add a component"),
                       ("probes.edge.stress.xx", "names: centre"),
                       ("probes[5].stress.xx", "has 1 item(s)"),
                       ("layer_figures.Si.mean_stress.xx", "it has: substrate, SiGe"),
                       ("probes.centre.strain.xx", "it has: name, stress"),
                       ("readouts.layers.SiGe.relaxation", "is a table"),
                       ("probes.centre.von_mises.xx", "is a number")):
        with pytest.raises(CaseError, match=re.escape(text)) as e:
            figure_value(SUMMARY, path, "collect.figures[0]")
        assert e.value.key == "collect.figures[0]"


def test_figure_units():
    assert figure_unit("probes.centre.stress.xx") == "MPa"
    assert figure_unit("probes.centre.strain.zz") == "1"
    assert figure_unit("probes.centre.displacement.z") == "nm"
    assert figure_unit("layer_figures.SiGe.mean_stress.xx") == "MPa"
    assert figure_unit("readouts.layers.SiGe.relaxation.+x.length", None, SUMMARY) == "nm"
    assert figure_unit("readouts.layers.SiGe.centre_over_blanket.xx") == "1"
    assert figure_unit("some.gap_mev") == "meV"
    assert figure_unit("some.thing", {"some.thing": "eV"}) == "eV"


def test_plots_have_units_and_one_line_per_other_value(tmp_path):
    sw = parse_sweep(_sweep(vary=[{"key": "pattern.width", "values": [200, 300, 400]},
                                  {"key": "layer[0].x", "values": [0.1, 0.2]}],
                            collect={"figures": ["probes.centre.stress.xx"]}),
                     base=SMALL_BASE)
    outs = []
    for c in expand(sw):
        oc = CaseOutcome(c, status="ok")
        oc.figures["probes.centre.stress.xx"] = -c.case.pattern.width * c.case.layers[0].x
        outs.append(oc)
    outs[3].status, outs[3].figures = "failed", {}
    paths = plot_sweep(sw, outs, tmp_path)
    names = sorted(p.name for p in paths)
    assert names == ["probes.centre.stress.xx--vs--layer_0.x.png",
                     "probes.centre.stress.xx--vs--pattern.width.png"]
    for p in paths:
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_headline_error_bars_are_collected_and_banded(tmp_path):
    # a headline figure collected by name brings its error bars: table columns and bands
    import csv

    from mesastrain.cli.sweep.figures import ERROR_CONTRIBUTIONS, error_paths
    from mesastrain.cli.sweep.tables import collect_figures, write_table
    from mesastrain.derived.headline import CONTRIBUTIONS

    assert tuple(ERROR_CONTRIBUTIONS) == CONTRIBUTIONS
    f = "headline.SiGe centre sxx.value"
    assert error_paths(f)["material_scatter"] == "headline.SiGe centre sxx.material_scatter.error"
    assert error_paths("probes.centre.stress.xx") == {}
    sw = parse_sweep(_sweep(vary=[{"key": "pattern.width", "values": [200, 300, 400]}],
                            collect={"figures": [f]}), base=SMALL_BASE)
    outs = []
    for k, c in enumerate(expand(sw)):
        row = {"name": "SiGe centre sxx", "value": -100.0 * (k + 1), "unit": "MPa",
               "material_scatter": {"error": 10.0 * (k + 1), "dominant": "SiGe lattice law"}}
        if k:                     # the first case ran without a discretisation estimate
            row["discretisation_error"] = {"error": 3.0}
        folder = tmp_path / "cases" / c.hash
        folder.mkdir(parents=True)
        (folder / "summary.json").write_text(json.dumps({"headline": [row]}))
        outs.append(CaseOutcome(c, status="ok"))
    errors, units = collect_figures(sw, tmp_path, outs)
    assert errors == {} and units[f] == "MPa"
    assert [oc.figures[f] for oc in outs] == [-100.0, -200.0, -300.0]
    write_table(sw, tmp_path, outs)
    rows = list(csv.DictReader((tmp_path / TABLE_CSV).open()))
    assert [r[error_paths(f)["material_scatter"]] for r in rows] == ["10", "20", "30"]
    assert [r[error_paths(f)["discretisation_error"]] for r in rows] == ["", "3", "3"]
    paths = plot_sweep(sw, outs, tmp_path / "plots")
    assert len(paths) == 1 and paths[0].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


# --------------------------------------------------------------------------
# command line without Dask
# --------------------------------------------------------------------------
def _small_files(tmp_path, vary: str) -> Path:
    base = tmp_path / "small.toml"
    base.write_text(
        'title = "small mesa"\n[substrate]\nmaterial = "Si"\nthickness = "50 um"\n'
        'normal = [0, 0, 1]\nx_axis = [1, 1, 0]\n[[layer]]\nmaterial = "SiGe"\nx = 0.2\n'
        'thickness = "20 nm"\n[pattern]\nshape = "rectangle"\nwidth = "200 nm"\n'
        'etch_depth = "30 nm"\n[mesh]\norder = 1\nsize = 50\nedge_size = 10\n'
        '[output]\nreport = false\n[device]\nmaps = false\n[readouts]\nbow = false\n'
        '[[probe]]\nname = "centre"\nat = [0, 0, 10]\n')
    sw = tmp_path / "small-sweep.toml"
    sw.write_text(f'base = "small.toml"\n{vary}\n[collect]\n'
                  f'figures = ["probes.centre.stress.xx"]\n')
    return sw


def test_dry_run_and_bad_out(tmp_path, capsys):
    sw = _small_files(tmp_path, '[[vary]]\nkey = "pattern.width"\nvalues = [200, -5]\n')
    assert main(["sweep", str(sw), "--dry-run", "--out", str(tmp_path / "o")]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert len(lines) == 2 and "[to run]" in lines[0] and "invalid: pattern.width" in lines[1]
    other = tmp_path / "not-a-sweep"
    other.mkdir()
    (other / "keep.txt").write_text("x")
    assert main(["sweep", str(sw), "--out", str(other)]) == 2
    err = capsys.readouterr().err
    assert "--out" in err and "not a sweep folder" in err and err.count("\n") == 1
    assert sorted(p.name for p in other.iterdir()) == ["keep.txt"]


@pytest.mark.slow
def test_unreachable_scheduler_is_one_line(tmp_path, capsys):
    import socket

    with socket.socket() as s:          # a free loopback port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    sw = _small_files(tmp_path, '[[vary]]\nkey = "pattern.width"\nvalues = [200]\n')
    rc = main(["sweep", str(sw), "--out", str(tmp_path / "o"), "--scheduler",
               f"tcp://127.0.0.1:{port}", "--wait", "2", "-q"])
    err = capsys.readouterr().err
    assert rc == 2 and "--scheduler: cannot reach a Dask scheduler" in err
    assert err.count("\n") == 1


# --------------------------------------------------------------------------
# on Dask
# --------------------------------------------------------------------------
def _demo_sweep():
    """The demo sweep file with a coarser mesh for the test."""
    data = tomllib.loads(DEMO_SWEEP.read_text())
    data["set"] = dict(COARSE)
    return parse_sweep(data, source=str(DEMO_SWEEP), base_dir=DEMO_SWEEP.parent)


@pytest.mark.slow
def test_mesa_width_sweep_on_local_cluster(tmp_path):
    sweep = _demo_sweep()
    out = tmp_path / "sweep"
    meta = run_sweep(sweep, out, workers=2, progress=False)
    _wait_no_children()
    assert meta["counts"] == {"cases": 6, "ok": 6, "failed": 0, "pending": 0, "ran_now": 6,
                              "reused": 0}
    assert meta["run"]["workers"] == 2 and "embedded" in meta["run"]["cluster"]
    assert meta["figure_errors"] == {}

    # one table, six rows
    import csv
    rows = list(csv.DictReader((out / TABLE_CSV).open()))
    assert len(rows) == 6 and {r["status"] for r in rows} == {"ok"}
    width = np.array([float(r["pattern.width"]) for r in rows])
    assert width[0] == 100.0 and width[-1] == 5000.0 and np.all(np.diff(width) > 0)
    sxx = np.array([float(r["probes.centre.stress.xx"]) for r in rows])

    # blanket Si0.7Ge0.3 on Si(001): sigma = M(001) f with M(001) = C11 + C12 - 2 C12^2/C11
    # and f = (a_Si - a_film)/a_film (REFERENCES.md section 4; Brantley, J. Appl. Phys. 44,
    # 534, 1973 for the in-plane invariance of E/(1 - nu) on {100})
    film, si = get_material("SiGe", 0.3), get_material("Si")
    c = film.constants
    blanket = (c["C11"] + c["C12"] - 2 * c["C12"] ** 2 / c["C11"]) * (si.a - film.a) / film.a
    blanket *= 1000.0                                   # GPa -> MPa
    assert blanket < -1500
    ratio = sxx / blanket
    # compressive everywhere, rising monotonically toward the blanket value with width ...
    assert np.all(sxx < 0) and np.all(np.diff(ratio) > 0)
    # ... never beyond it, the narrowest mesa well relaxed, the widest within 1 % of it
    assert np.all(ratio < 1.0 + 1e-3) and ratio[0] < 0.5 and ratio[-1] > 0.99
    # the readouts' own centre/blanket ratio agrees with this closed form
    rb = np.array([float(r["readouts.layers.SiGe.centre_over_blanket.xx"]) for r in rows])
    assert rb == pytest.approx(ratio, rel=1e-4)

    # metadata, folders and plots
    m = json.loads((out / META_JSON).read_text())
    units = {col["name"]: col["unit"] for col in m["columns"]}
    assert units["pattern.width"] == "nm" and units["probes.centre.stress.xx"] == "MPa"
    for r in rows:
        folder = out / "cases" / r["hash"]
        assert (folder / "summary.json").is_file() and (folder / "fields.vtu").is_file()
        rec = json.loads((folder / CASE_RECORD).read_text())
        assert rec["status"] == "ok" and rec["resolved"]["pattern.width"] == float(
            r["pattern.width"])
    assert [p.name for p in (out / "cases").iterdir() if p.name.startswith(".")] == []
    assert len(m["files"]["plots"]) == 4
    assert all((out / p).is_file() for p in m["files"]["plots"])
    text = summary_text(sweep, meta, meta["outcomes"])
    assert "6 case(s): 6 ok" in text and "probes.centre.stress.xx (MPa)" in text


@pytest.mark.slow
def test_killed_sweep_resumes_only_the_missing_cases(tmp_path, dask_cluster):
    set_lines = "".join(f'"{k}" = {json.dumps(v)}\n' for k, v in COARSE.items())
    sw = tmp_path / "resume.toml"
    sw.write_text(f'base = {json.dumps(str(DEMO_BASE))}\n[set]\n{set_lines}'
                  '[[vary]]\nkey = "pattern.width"\nvalues = ["0.3 um", "0.6 um", "1.2 um"]\n'
                  '[collect]\nfigures = ["probes.centre.stress.xx"]\n')
    out = tmp_path / "sweep"
    cases = out / "cases"
    # one worker, so the cases finish one after another; kill the driver after the first
    proc = subprocess.Popen([sys.executable, "-m", "mesastrain", "sweep", str(sw), "--out",
                             str(out), "--workers", "1", "-q"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                            start_new_session=True)
    try:
        t0 = time.monotonic()
        while time.monotonic() - t0 < 120:
            done = [p for p in cases.glob("*") if not p.name.startswith(".")] \
                if cases.is_dir() else []
            if done or proc.poll() is not None:
                break
            time.sleep(0.02)
        assert proc.poll() is None, proc.stderr.read().decode()
        os.kill(proc.pid, signal.SIGKILL)          # the driver only: a hard kill mid-sweep
        proc.wait(timeout=30)
        # its worker processes notice and exit by themselves
        t0 = time.monotonic()
        while _group_alive(proc.pid) and time.monotonic() - t0 < 30:
            time.sleep(0.2)
        assert not _group_alive(proc.pid), "worker processes outlived the killed sweep"
    finally:
        _end_group(proc)
        proc.stderr.close()
    first = {p.name: (p / CASE_RECORD).stat().st_mtime_ns
             for p in cases.iterdir() if not p.name.startswith(".")}
    assert 1 <= len(first) < 3
    assert all((cases / h / "summary.json").is_file() for h in first)

    # re-run the same sweep (here on the separately started scheduler)
    meta = run_sweep(load_sweep(sw), out, scheduler=dask_cluster, progress=False)
    assert meta["counts"]["ok"] == 3 and meta["counts"]["reused"] == len(first)
    assert meta["counts"]["ran_now"] == 3 - len(first)
    for h, mtime in first.items():                  # untouched
        assert (cases / h / CASE_RECORD).stat().st_mtime_ns == mtime
    events = [json.loads(line) for line in (out / LOG_JSONL).read_text().splitlines()]
    runs = list(dict.fromkeys(e["run"] for e in events))
    assert len(runs) == 2
    ran_second = {e["hash"] for e in events if e["run"] == runs[1] and e["event"] == "case"}
    all_hashes = {oc.case.hash for oc in meta["outcomes"]}
    assert ran_second == all_hashes - set(first)
    assert [p.name for p in cases.iterdir() if p.name.startswith(".")] == []


@pytest.mark.slow
def test_failed_cases_are_recorded_on_external_scheduler(tmp_path, dask_cluster, capsys):
    # case 0 runs; case 1 is not allowed (negative width); case 2 passes validation but its
    # solver is given one iteration, so it fails on the worker
    sw = _small_files(tmp_path, 'combine = "zip"\n'
                                '[[vary]]\nkey = "pattern.width"\nvalues = [200, -50, 200]\n'
                                '[[vary]]\nkey = "solver.method"\n'
                                'values = ["direct", "direct", "iterative"]\n'
                                '[set]\n"solver.max_iterations" = 1\n')
    out = tmp_path / "sweep"
    rc = main(["sweep", str(sw), "--out", str(out), "--scheduler", dask_cluster])
    text = capsys.readouterr().out
    assert rc == 1
    import csv
    rows = list(csv.DictReader((out / TABLE_CSV).open()))
    assert [r["status"] for r in rows] == ["ok", "failed", "failed"]
    assert rows[0]["error"] == "" and float(rows[0]["probes.centre.stress.xx"]) < 0
    assert rows[1]["error"].startswith("pattern.width: must be > 0")
    assert rows[2]["error"] and "\n" not in rows[2]["error"]
    assert (out / "cases" / rows[0]["hash"] / "fields.vtu").is_file()
    assert not (out / "cases" / rows[2]["hash"]).exists()
    meta = json.loads((out / META_JSON).read_text())
    assert [f["case"] for f in meta["failures"]] == [1, 2]
    assert meta["run"]["cluster"] == f"Dask scheduler {dask_cluster}"
    assert "case 1 failed: pattern.width: must be > 0" in text
