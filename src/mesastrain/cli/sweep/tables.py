"""What a sweep leaves besides the case folders: the results table (CSV, and
Parquet when pyarrow is installed), the metadata file, the plots, and the
plain-text summary the command prints."""

from __future__ import annotations

import csv
import io
import os
import re
import uuid
from pathlib import Path

import numpy as np

from mesastrain import __version__
from mesastrain.cli.sweep.figures import ERROR_CONTRIBUTIONS, error_paths, figure_unit, figure_value
from mesastrain.cli.sweep.spec import Sweep
from mesastrain.cli.sweep.store import (
    CASES_DIR,
    LOG_JSONL,
    META_JSON,
    PLOTS_DIR,
    TABLE_CSV,
    TABLE_PARQUET,
    atomic_write,
    read_json,
)
from mesastrain.errors import CaseError
from mesastrain.units import fmt, is_number


def _label(name: str, unit: str) -> str:
    if unit in ("", None):
        return name
    if unit == "1":
        return f"{name} (dimensionless)"
    return f"{name} ({unit})"


def collect_figures(sweep: Sweep, out: Path, outcomes) -> tuple[dict, dict]:
    """Fill each ok outcome's figures from its summary.json.

    Returns
    -------
    errors : dict
        Figure path -> first error, for paths that no case resolves.
    units : dict
        Figure path -> unit (:func:`figure_unit` with the first summary).
    """
    errors, resolved = {}, {f: False for f in sweep.figures}
    first = None
    for oc in outcomes:
        if oc.status != "ok":
            continue
        summary = read_json(out / CASES_DIR / oc.case.hash / "summary.json")
        first = first if first is not None else summary
        for k, f in enumerate(sweep.figures):
            try:
                oc.figures[f] = figure_value(summary, f, f"collect.figures[{k}]")
                resolved[f] = True
            except CaseError as err:
                oc.figures[f] = None
                errors.setdefault(f, str(err))
            for ep in error_paths(f).values():     # absent when a run did not compute it
                try:
                    oc.figures[ep] = figure_value(summary, ep)
                except CaseError:
                    oc.figures[ep] = None
    units = {f: figure_unit(f, sweep.units, first) for f in sweep.figures}
    return {f: e for f, e in errors.items() if not resolved[f]}, units


def _columns(sweep: Sweep, units: dict | None = None) -> list[dict]:
    cols = [{"name": "case", "unit": "", "meaning": "row number in expansion order (from 0)"},
            {"name": "hash", "unit": "", "meaning": "resume key; the case folder is cases/<hash>"},
            {"name": "status", "unit": "", "meaning": "ok | failed | pending (not run yet)"},
            {"name": "seconds", "unit": "s", "meaning": "wall time of the case on its worker"}]
    for ax in sweep.axes:
        cols.append({"name": ax.key, "unit": ax.unit, "meaning": "varied case-file key "
                     "(resolved value: lengths nm, temperatures K)"})
    for f in sweep.figures:
        unit = (units or {}).get(f, figure_unit(f, sweep.units))
        cols.append({"name": f, "unit": unit, "meaning": "figure from the case's summary.json"})
        for c, ep in error_paths(f).items():
            cols.append({"name": ep, "unit": unit,
                         "meaning": f"error bar of {f}: {ERROR_CONTRIBUTIONS[c]} "
                                    f"({c}; empty where the run did not compute it)"})
    cols.append({"name": "error", "unit": "", "meaning": "why the case failed"})
    return cols


def _rows(sweep: Sweep, outcomes) -> list[list]:
    rows = []
    for oc in outcomes:
        res = oc.case.resolved()
        row = [oc.case.index, oc.case.hash, oc.status, oc.seconds]
        row += [res[ax.key] for ax in sweep.axes]
        for f in sweep.figures:
            row.append(oc.figures.get(f))
            row += [oc.figures.get(ep) for ep in error_paths(f).values()]
        row.append(oc.error or "")
        rows.append(row)
    return rows


def write_table(sweep: Sweep, out: Path, outcomes) -> list[str]:
    """Write ``sweep-table.csv`` (and ``.parquet`` with pyarrow); return the file names."""
    cols = [c["name"] for c in _columns(sweep)]
    rows = _rows(sweep, outcomes)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(cols)
    for r in rows:
        w.writerow(["" if v is None else (fmt(v, ".10g") if isinstance(v, float) else v)
                    for v in r])
    atomic_write(out / TABLE_CSV, buf.getvalue())
    files = [TABLE_CSV]
    import importlib.util

    if importlib.util.find_spec("pyarrow") is not None:   # optional; never a dependency
        import pyarrow as pa
        import pyarrow.parquet as pq

        data = {}
        for j, name in enumerate(cols):
            vals = [r[j] for r in rows]
            if all(v is None or (is_number(v)) for v in vals):
                data[name] = pa.array([None if v is None else float(v) for v in vals],
                                      type=pa.float64())
            else:
                data[name] = pa.array(["" if v is None else str(v) for v in vals])
        tmp = out / f".{TABLE_PARQUET}.tmp-{uuid.uuid4().hex[:8]}"
        pq.write_table(pa.table(data), tmp)
        os.replace(tmp, out / TABLE_PARQUET)
        files.append(TABLE_PARQUET)
    return files


def write_outputs(sweep, out, outcomes, started, wall, cluster_desc, n_workers, interrupted,
                  run_id, plots=True) -> dict:
    """Write the table, the plots (when ``plots``) and ``sweep-meta.json``.

    Returns
    -------
    dict
        The metadata as written.
    """
    from mesastrain.io.export import write_json
    from mesastrain.io.folder import CAUTION

    fig_errors, units = collect_figures(sweep, out, outcomes)
    files = write_table(sweep, out, outcomes)
    plot_files = []
    if plots:
        plot_dir = out / PLOTS_DIR
        plot_files = [str(p.relative_to(out))
                      for p in plot_sweep(sweep, outcomes, plot_dir, units)]
    counts = {"cases": len(outcomes),
              "ok": sum(oc.status == "ok" for oc in outcomes),
              "failed": sum(oc.status == "failed" for oc in outcomes),
              "pending": sum(oc.status == "pending" for oc in outcomes),
              "ran_now": sum(oc.ran_now for oc in outcomes),
              "reused": sum(oc.status == "ok" and not oc.ran_now for oc in outcomes)}
    meta = {
        "program": {"name": "mesastrain", "version": __version__},
        "title": sweep.title,
        "sweep": sweep.to_dict(),
        "run": {"id": run_id, "started": started.isoformat(timespec="seconds"),
                "wall_seconds": round(wall, 3), "cluster": cluster_desc,
                "workers": n_workers, "interrupted": interrupted},
        "counts": counts,
        "columns": _columns(sweep, units),
        "files": {"table": files, "log": LOG_JSONL, "cases": f"{CASES_DIR}/<hash>/",
                  "plots": plot_files},
        "figure_errors": fig_errors,
        "failures": [{"case": oc.case.index, "hash": oc.case.hash,
                      "parameters": dict(oc.case.params), "error": oc.error,
                      **({"traceback": oc.traceback} if oc.traceback else {})}
                     for oc in outcomes if oc.status == "failed"],
        "hash": "SHA-256 of the canonical JSON of the resolved case (Case.to_dict() without "
                "the title), first 16 hex digits",
        "caution": CAUTION,
    }
    tmp = out / f".{META_JSON}.tmp-{uuid.uuid4().hex[:8]}"
    write_json(tmp, meta)
    os.replace(tmp, out / META_JSON)
    return meta


def _numeric(values) -> bool:
    return all(is_number(v) for v in values)


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name.replace("[", "_").replace("]", "")).strip("_")


def plot_sweep(sweep: Sweep, outcomes, folder: Path, units: dict | None = None) -> list[Path]:
    """One PNG per collected figure and varied key.

    The figure is drawn against the key's resolved value (a logarithmic axis
    when positive values span more than a factor of 20); with several varied
    keys, one line per combination of the others. Failed cases leave gaps and
    are counted in the title; a zero line is drawn when the values change
    sign.

    Parameters
    ----------
    sweep : Sweep
    outcomes : list of CaseOutcome
        With their figures collected.
    folder : Path
        Where the PNGs go (created).
    units : dict of str -> str, optional
        Figure path -> unit (default: :func:`figure_unit` from the path).

    Returns
    -------
    list of Path
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter, NullFormatter

    folder = Path(folder)
    written = []
    resolved = [oc.case.resolved() for oc in outcomes]
    for ax in sweep.axes:
        xs_all = [r[ax.key] for r in resolved]
        distinct = list(dict.fromkeys(xs_all))
        if len(distinct) < 2:
            continue
        numeric = _numeric(distinct)
        others = [a for a in sweep.axes if a is not ax]
        for f in sweep.figures:
            groups: dict[tuple, list] = {}
            failed = 0
            for oc, r in zip(outcomes, resolved):
                y = oc.figures.get(f) if oc.status == "ok" else None
                if oc.status == "failed":
                    failed += 1
                gk = tuple(r[a.key] for a in others) if sweep.combine == "grid" else ()
                bars = {c: (oc.figures.get(ep) if oc.status == "ok" else None)
                        for c, ep in error_paths(f).items()}
                groups.setdefault(gk, []).append((r[ax.key], y, bars))
            if not any(p[1] is not None for pts in groups.values() for p in pts):
                continue
            fig = Figure(figsize=(6.4, 4.4), dpi=110)
            FigureCanvasAgg(fig)
            pl = fig.add_subplot()
            allx, ally = [], []
            for gk, pts in groups.items():
                if numeric:
                    pts = sorted(pts, key=lambda p: p[0])
                    x = [p[0] for p in pts]
                else:
                    x = [distinct.index(p[0]) for p in pts]
                y = [np.nan if p[1] is None else p[1] for p in pts]
                lab = ", ".join(f"{a.key} = {v:g}" + (f" {a.unit}" if a.unit not in ("", "1")
                                                          else "")
                                if is_number(v) else f"{a.key} = {v}"
                                for a, v in zip(others, gk)) or None
                line, = pl.plot(x, y, marker="o", label=lab)
                banded = _error_bands(pl, x, y, [p[2] for p in pts], line.get_color(),
                                      len(groups) == 1)
                ally += banded
                allx += [xi for xi, yi in zip(x, y) if np.isfinite(yi)]
                ally += [yi for yi in y if np.isfinite(yi)]
            if numeric and min(distinct) > 0 and max(distinct) / min(distinct) > 20:
                pl.set_xscale("log")
                pl.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
                pl.xaxis.set_minor_formatter(NullFormatter())
            if not numeric:
                pl.set_xticks(range(len(distinct)))
                pl.set_xticklabels([str(d) for d in distinct], rotation=30, ha="right")
            if ally and min(ally) < 0 < max(ally):
                pl.axhline(0.0, color="0.5", lw=0.8)
            pl.set_xlabel(_label(ax.key, ax.unit))
            pl.set_ylabel(_label(f, (units or {}).get(f) or figure_unit(f, sweep.units)))
            title = f"{f} against {ax.key}"
            if failed:
                title += f"\n({failed} failed case(s) not shown)"
            pl.set_title(title, fontsize=10)
            fig.suptitle(sweep.title, fontsize=8, color="0.35")
            pl.grid(True, which="both", alpha=0.3)
            if (len(groups) > 1 and len(groups) <= 10) or pl.get_legend_handles_labels()[1]:
                pl.legend(fontsize=8)
            fig.tight_layout()
            folder.mkdir(parents=True, exist_ok=True)
            path = folder / f"{_safe(f)}--vs--{_safe(ax.key)}.png"
            tmp = path.with_name(f".{path.name}.tmp.png")
            fig.savefig(tmp)
            os.replace(tmp, path)
            written.append(path)
    return written


def _error_bands(pl, x, y, bars: list, color, label: bool) -> list:
    """Shade each error contribution of a headline figure around its curve (fill_between).

    Returns the band edges drawn (for the zero line decision).
    """
    edges = []
    for k, (c, text) in enumerate(ERROR_CONTRIBUTIONS.items()):
        e = np.array([np.nan if b.get(c) is None else b[c] for b in bars], dtype=float)
        if not np.any(np.isfinite(e)):
            continue
        yv = np.asarray(y, dtype=float)
        lo, hi = yv - e, yv + e
        pl.fill_between(x, lo, hi, color=color, alpha=0.18 if k else 0.32, lw=0,
                        hatch=None if k else "//",
                        label=f"\N{PLUS-MINUS SIGN} {text}" if label else None)
        edges += [v for v in np.concatenate([lo, hi]) if np.isfinite(v)]
    return edges


def summary_text(sweep: Sweep, meta: dict, outcomes, max_rows: int = 40) -> str:
    """Short plain-text table of a finished sweep (what the command prints)."""
    units = {c["name"]: c["unit"] for c in meta["columns"]}
    cols = [("case", ""), *[(ax.key, ax.unit) for ax in sweep.axes], ("status", ""),
            ("time", "s"), *[(f, units.get(f, "")) for f in sweep.figures]]
    head = [_label(n, u) if u not in ("", "1") else n for n, u in cols]
    body = []
    for oc in outcomes[:max_rows]:
        res = oc.case.resolved()
        cells = [str(oc.case.index)]
        cells += [(fmt(res[ax.key], ".6g") if is_number(res[ax.key]) else str(res[ax.key]))
                  for ax in sweep.axes]
        cells.append(oc.status + ("" if oc.ran_now or oc.status != "ok" else "*"))
        cells.append("" if oc.seconds is None else fmt(oc.seconds, ".1f"))
        for f in sweep.figures:
            v = oc.figures.get(f)
            cells.append("" if v is None else fmt(v, ".6g"))
        body.append(cells)
    widths = [max(len(h), *(len(r[j]) for r in body)) if body else len(h)
              for j, h in enumerate(head)]
    lines = ["  ".join(h.rjust(w) for h, w in zip(head, widths))]
    lines += ["  ".join(c.rjust(w) for c, w in zip(r, widths)) for r in body]
    if len(outcomes) > max_rows:
        lines.append(f"... {len(outcomes) - max_rows} more row(s) in {TABLE_CSV}")
    c = meta["counts"]
    lines.append(f"{c['cases']} case(s): {c['ok']} ok ({c['ran_now']} run now, {c['reused']} "
                 f"reused, marked *), {c['failed']} failed"
                 + (f", {c['pending']} not run" if c["pending"] else "")
                 + f"; {meta['run']['wall_seconds']:.1f} s wall time")
    for fl in meta["failures"][:10]:
        lines.append(f"case {fl['case']} failed: {fl['error']}")
    if len(meta["failures"]) > 10:
        lines.append(f"... {len(meta['failures']) - 10} more failure(s) in {META_JSON}")
    for e in meta["figure_errors"].values():
        lines.append(f"warning: {e}")
    return "\n".join(lines)
