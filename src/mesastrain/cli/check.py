"""``mesastrain check CASE``: validate a case and estimate its size, memory and time.

Nothing is solved; the estimate is :func:`mesastrain.run.resources.estimate`.
Exit status 2 when the case does not fit in the available memory.
"""

from __future__ import annotations

import json

from mesastrain.case.parse import load_case
from mesastrain.cli.common import EXIT_USAGE, err, notes


def _films(case, key: str, items) -> str:
    """``name thickness`` of each layer or liner, thickness as the case file wrote it."""
    return ", ".join(f"{it.name} "
                     f"{case.as_written(f'{key}[{i}].thickness') or f'{it.thickness:g} nm'}"
                     for i, it in enumerate(items))


def cmd_check(args) -> int:
    """``mesastrain check``: 0 when the case is valid and fits in memory, 2 otherwise."""
    from mesastrain.fem.parallel import usable_cores
    from mesastrain.mesh.kinds import mesh_kind
    from mesastrain.run.resources import (
        available_memory_gb,
        error_bar_seconds,
        estimate,
    )

    case = load_case(args.case)
    notes(case)
    est = estimate(case)
    avail = available_memory_gb()
    d = est.to_dict()
    d["memory_available_gb"] = round(avail, 2)
    d["fits"] = est.memory_gb <= avail
    d["cores"] = cores = usable_cores()
    d["error_bar_seconds"] = bars = round(error_bar_seconds(case, est), 1)
    d["mesh_kind"] = mesh_kind(case)
    if args.json:
        print(json.dumps(d))
    else:
        print(f"case      {args.case}: {case.title} (valid)")
        sub = case.as_written("substrate.thickness") or f"{case.substrate.thickness:g} nm"
        print(f"stack     substrate {case.substrate.material} {sub}; layers "
              f"{_films(case, 'layer', case.layers)} ({case.stack_thickness:g} nm in all); "
              f"pattern {case.pattern.shape}"
              + (f"; liners {_films(case, 'liner', case.liners)}" if case.liners else ""))
        sol = d["solved"]
        model = "" if sol["symmetry"] == "full" else f", {sol['symmetry']} model"
        print(f"elements  {sol['element_type']}, order {est.order} ({d['mesh_kind']} "
              f"mesh{model})")
        print(f"solved    {sol['unknowns']:,} unknowns, {sol['nodes']:,} nodes, "
              f"{sol['elements']:,} elements (solver: {est.method})")
        print(f"exported  {est.nodes:,} nodes, {est.elements:,} elements in fields.vtu"
              + (" (the section as one layer of hexahedra)" if "section" in sol["element_type"]
                 else " (the whole body, mirrored)" if model else ""))
        print(f"memory    about {est.memory_gb:.2f} GB (available {avail:.1f} GB)")
        print(f"time      about {est.seconds:.0f} s on {cores} core{'s' * (cores != 1)} "
              f"(rough)" + (f", of which about {bars:.0f} s for the error bars (see "
                            f"[mesh] error_estimate, [uncertainty] enabled)" if bars >= 0.5
                            else ""))
    if not d["fits"]:
        err(f"mesh: the case needs about {est.memory_gb:.1f} GB but only {avail:.1f} GB are "
            "available; coarsen mesh.size / mesh.edge_size")
        return EXIT_USAGE
    return 0


def add_command(subparsers) -> None:
    """Add ``mesastrain check CASE [--json]`` to the command line."""
    c = subparsers.add_parser("check", help="validate a case and estimate its size, memory "
                                            "and time")
    c.add_argument("case", help="case file (TOML)")
    c.add_argument("--json", action="store_true", help="print the estimate as JSON")
    c.set_defaults(func=cmd_check)
