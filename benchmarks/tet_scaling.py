"""End-to-end `mesastrain run` of a whole-model polygon pad on quadratic tetrahedra.

Each size runs in its own process (``--child``): the case file is written, the
command line's ``run`` is called in-process, and the child reports wall time,
the stage timings of ``summary.json``, the solver's iterations and its own peak
resident memory (VmHWM). The parent prints one table row per size, with the
estimate of ``mesastrain check`` beside the measurement.

    python benchmarks/tet_scaling.py [size_nm ...]   # default: 19 11 8 6.8

Sizes are ``mesh.size`` of the film (``edge_size`` half of it): about 100k, 320k,
630k and 1M unknowns. State the machine load when quoting the numbers.
"""

from __future__ import annotations

import json
import os
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import ROOT, peak_rss_gb, run_child  # noqa: E402

PAD = ROOT / "cases" / "sige_l_pad.toml"


def case_text(size: float, order: int = 2, base: Path = PAD) -> str:
    """The L-shaped pad with ``mesh.size`` set (edge size half of it) and the order."""
    import tomllib

    text = base.read_text()
    data = tomllib.loads(text)
    lines = []
    in_mesh = False
    for line in text.splitlines():
        s = line.strip()
        if s.startswith("["):
            in_mesh = s == "[mesh]"
        if in_mesh and s.split("=")[0].strip() in ("size", "edge_size", "order"):
            continue
        lines.append(line)
        if s == "[mesh]":
            lines += [f"order = {order}", f'size = "{size} nm"', f'edge_size = "{size / 2} nm"']
    if "mesh" not in data:
        lines += ["[mesh]", f"order = {order}", f'size = "{size} nm"',
                  f'edge_size = "{size / 2} nm"']
    return "\n".join(lines) + "\n"


def child(case_path: str) -> None:
    from mesastrain.case.parse import load_case
    from mesastrain.cli.main import main
    from mesastrain.run.resources import estimate

    est = estimate(load_case(case_path))
    out = Path(tempfile.mkdtemp(prefix="tet-scaling-")) / "result"
    t = time.perf_counter()
    c = time.process_time()
    rc = main(["run", case_path, "--out", str(out), "-q"])
    wall = time.perf_counter() - t
    cpu = time.process_time() - c
    summ = json.loads((out / "summary.json").read_text())
    print(json.dumps({"rc": rc, "wall": wall, "cpu": cpu, "peak_gb": peak_rss_gb(),
                      "nodes": summ["mesh"]["exported"]["nodes"],
                      "unknowns": summ["mesh"]["solved"]["unknowns"], "timings": summ["timings"],
                      "solved": summ["solver"].get("unknowns", summ["mesh"]["solved"]["unknowns"]),
                      "solver": summ["solver"], "est_s": est.seconds,
                      "est_gb": est.memory_gb, "est_unknowns": est.unknowns,
                      "est_solved": est.solved_unknowns or est.unknowns}))


def measure(text: str) -> dict:
    with tempfile.NamedTemporaryFile("w", suffix=".toml", delete=False) as fh:
        fh.write(text)
    try:
        return run_child(Path(__file__), ["--child", fh.name])
    finally:
        os.unlink(fh.name)


def row(label: str, r: dict) -> str:
    if "error" in r:
        return f"| {label} | {r['error']} |"
    t, s = r["timings"], r["solver"]
    # the writing as a whole (its write_* parts overlap: fields.vtu beside the pictures)
    write = t.get("writing", sum(v for k, v in t.items() if k.startswith("write_")))
    stages = sum(v for k, v in t.items() if not k.startswith("write") and k != "writing")
    other = r["wall"] - stages - write           # start-up and what no stage timer covers
    return (f"| {label} | {r['unknowns']:,} | {t.get('mesh', 0):.1f} | {t.get('assembly', 0):.1f} | "
            f"{s['setup_time']:.1f} | {s['iterations']} | {s['solve_time']:.1f} | "
            f"{t.get('sensitivities', 0):.1f} | "
            f"{t.get('recovery', 0):.1f} | {t.get('derived', 0):.1f} | {write:.1f} | {other:.1f} | "
            f"{r['wall']:.1f} | {r['peak_gb']:.2f} | {r['est_s']:.1f} | {r['est_gb']:.2f} |")


HEADER = ("| case | unknowns | mesh s | assembly s | MG setup s | CG it | iterations s | "
          "extra RHS s | recovery s | derived s | writing s | start+other s | total s | peak GB | "
          "check s | check GB |\n"
          "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|")


def main(argv: list[str]) -> None:
    sizes = [float(a) for a in argv] or [19.0, 11.0, 8.0, 6.8]
    print(f"load average before: {os.getloadavg()}")
    print(HEADER)
    for size in sizes:
        print(row(f"L pad P2, size {size:g} nm", measure(case_text(size))), flush=True)
    print(f"load average after: {os.getloadavg()}")


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--child":
        child(sys.argv[2])
    else:
        main(sys.argv[1:])
