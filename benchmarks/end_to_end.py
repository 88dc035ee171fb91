"""``mesastrain run`` end to end, stage by stage, as a user runs it.

Usage::

    python benchmarks/end_to_end.py                    # demo, ~100k and ~1M solved unknowns
    python benchmarks/end_to_end.py --sizes 100e3      # chosen sizes of the structured mesa
    python benchmarks/end_to_end.py --no-demo --quick  # with run --quick
    python benchmarks/end_to_end.py --plain            # without the error bars of issue 17

Each run is ``mesastrain run CASE --out DIR`` in its own Python process (the
command line's own code path, so start-up and every default output count).
The sized cases are the demo quarter mesa (``cases/sige_stressor_mesa.toml``)
with ``mesh.refine`` chosen for the requested number of solved unknowns.
Columns (seconds of wall time unless stated):

start
    imports before the first stage (the command line's start-up, measured from
    the first line of the child process: the interpreter's own start is not in it)
mesh, assembly, solve, sensitivities, recovery, derived
    the stages of ``summary.json`` ``timings`` (solve includes the multigrid set-up;
    sensitivities are the extra solves of the material scatter, column "sensitiv")
fields, tables, pictures, report
    the writing stages (``write_*`` timings): fields.vtu, CSV files, every PNG,
    report.html; fields.vtu is written on a second thread beside the tables and
    pictures, so these overlap
total
    wall time of the whole process
out %
    the wall time of all the writing (``timings`` ``writing``) / total
peak GB
    peak resident memory of the process (VmHWM)
vtu MB, B/node
    size of fields.vtu, and per node of the exported (mirrored) body
cpu s
    CPU time of the process (user + system): less sensitive to other load

Other processes on the machine change the wall times; the table prints the load
average before and after.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from common import DEMO, ROOT, peak_rss_gb, refine_for  # noqa: E402

STAGES = ("mesh", "assembly", "solve", "sensitivities", "recovery", "derived")
WRITES = ("write_fields", "write_tables", "write_pictures", "write_report")


def child(case: str, out: str, quick: bool) -> None:
    """Run ``mesastrain run`` in this process and print one JSON line of measurements."""
    t0 = time.perf_counter()
    c0 = time.process_time()
    import mesastrain.derived  # noqa: F401  (what run imports before its first stage)
    import mesastrain.io.folder  # noqa: F401
    from mesastrain.cli.main import main

    start = time.perf_counter() - t0
    argv = ["run", case, "--out", out, "--quiet", "--overwrite"] + (["--quick"] if quick else [])
    rc = main(argv)
    wall = time.perf_counter() - t0
    summary = json.loads((Path(out) / "summary.json").read_text(encoding="utf-8"))
    vtu = Path(out) / "fields.vtu"
    print(json.dumps({"rc": rc, "start": start, "wall": wall, "cpu": time.process_time() - c0,
                      "peak_gb": peak_rss_gb(), "timings": summary["timings"],
                      "nodes": summary["mesh"]["exported"]["nodes"],
                      "solved": summary["mesh"]["solved"]["unknowns"],
                      "vtu_bytes": vtu.stat().st_size if vtu.is_file() else 0}))


#: What ``--plain`` adds to a case: no discretisation-error estimate, no material scatter.
PLAIN = ("[mesh]\nerror_estimate = false\n", "\n[uncertainty]\nenabled = false\n")


def plain_text(text: str) -> str:
    """A case text without the error bars (``[mesh] error_estimate``, ``[uncertainty]``)."""
    return text.replace("[mesh]\n", PLAIN[0], 1) + PLAIN[1]


def sized_case(target: float, folder: Path, plain: bool = False) -> Path:
    """The demo case with ``mesh.refine`` set for about ``target`` solved unknowns."""
    r = refine_for(int(target))
    text = DEMO.read_text(encoding="utf-8").replace("[mesh]\n", f"[mesh]\nrefine = {r:.6g}\n", 1)
    if plain:
        text = plain_text(text)
    path = folder / f"mesa_{int(target)}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def measure(case: Path, out: Path, quick: bool, src: Path = ROOT / "src") -> dict:
    env = dict(os.environ, PYTHONPATH=str(src) + os.pathsep
               + os.environ.get("PYTHONPATH", ""))
    p = subprocess.run([sys.executable, __file__, "--child", str(case), str(out)]
                       + (["--quick"] if quick else []), env=env, capture_output=True,
                       text=True)
    if p.returncode != 0:
        raise SystemExit(f"{case.name} failed:\n{p.stderr[-2000:]}")
    return json.loads(p.stdout.strip().splitlines()[-1])


def table(rows: list[tuple[str, dict]]) -> str:
    head = (f"{'case':<12}{'solved':>10}{'nodes':>10}{'start':>7}"
            + "".join(f"{s[:8]:>9}" for s in STAGES)
            + "".join(f"{s[6:]:>9}" for s in WRITES)
            + f"{'total':>8}{'out %':>7}{'peak GB':>8}{'vtu MB':>8}{'B/node':>7}{'cpu s':>7}")
    lines = [head]
    for name, m in rows:
        t = m["timings"]
        out = t.get("writing", sum(t.get(k, 0.0) for k in WRITES))   # the parts overlap
        lines.append(
            f"{name:<12}{m['solved']:>10,}{m['nodes']:>10,}{m['start']:>7.2f}"
            + "".join(f"{t.get(s, 0.0):>9.2f}" for s in STAGES)
            + "".join(f"{t.get(s, 0.0):>9.2f}" for s in WRITES)
            + f"{m['wall']:>8.1f}{100 * out / m['wall']:>7.1f}{m['peak_gb']:>8.2f}"
            + f"{m['vtu_bytes'] / 1e6:>8.1f}{m['vtu_bytes'] / max(m['nodes'], 1):>7.1f}"
            + f"{m['cpu']:>7.1f}")
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", nargs="*", type=float, default=[100e3, 1e6],
                    help="solved unknowns of the structured quarter mesa")
    ap.add_argument("--no-demo", action="store_true", help="skip the demo case")
    ap.add_argument("--quick", action="store_true", help="run --quick (no pictures, no report)")
    ap.add_argument("--plain", action="store_true",
                    help="without the discretisation error and the material scatter")
    ap.add_argument("--src", type=Path, default=ROOT / "src",
                    help="the mesastrain source measured (e.g. another checkout's src/, "
                         "for a before/after table)")
    ap.add_argument("--child", nargs=2, metavar=("CASE", "OUT"), help=argparse.SUPPRESS)
    a = ap.parse_args(argv)
    if a.child:
        child(a.child[0], a.child[1], a.quick)
        return 0
    rows = []
    load0 = os.getloadavg()
    with tempfile.TemporaryDirectory(prefix="mesastrain-e2e-") as tmp:
        tmp = Path(tmp)
        cases = []
        if not a.no_demo:
            demo = DEMO
            if a.plain:
                demo = tmp / "demo_plain.toml"
                demo.write_text(plain_text(DEMO.read_text(encoding="utf-8")), encoding="utf-8")
            cases.append(("demo", demo))
        cases += [(f"mesa {s / 1e3:g}k", sized_case(s, tmp, a.plain)) for s in a.sizes]
        for name, case in cases:
            rows.append((name, measure(case, tmp / f"out_{len(rows)}", a.quick, a.src)))
            print(table(rows[-1:]).splitlines()[-1], file=sys.stderr, flush=True)
    print(table(rows))
    load1 = os.getloadavg()
    print(f"{os.cpu_count()} cores; load average {load0[0]:.1f} before, {load1[0]:.1f} after"
          + ("; run --quick" if a.quick else "") + ("; plain (no error bars)" if a.plain else ""))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
