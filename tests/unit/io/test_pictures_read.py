"""Every picture reads at a glance: no text box overlaps another or leaves the figure, and
colour bars carry round ticks and limits (issue 18).

The figures are measured with matplotlib's own text extents (``get_window_extent``) on the
canvas they are saved from; the PNG writers are run with ``Figure.savefig`` replaced by a
recorder, so the checks see exactly the figures the tool writes.
"""

import math

import numpy as np
import pytest

from mesastrain.io.maps import FieldSource, build_map, nice_limit
from mesastrain.physics.quantities import describe, parameter_words, valley_words


# --------------------------------------------------------------------------
# measuring
# --------------------------------------------------------------------------
def _in_view(axis, loc, lim):
    lo, hi = sorted(lim)
    return lo - 1e-9 * (hi - lo) <= loc <= hi + 1e-9 * (hi - lo)


def text_boxes(fig) -> list:
    """(text, bbox in pixels) of every visible, non-empty text of a figure."""
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    out, seen = [], set()

    def add(t, what=None):
        if t is not None and id(t) not in seen and t.get_visible() and t.get_text().strip():
            seen.add(id(t))
            out.append((what or t.get_text(), t.get_window_extent(r)))

    for t in fig.texts:
        add(t)
    if getattr(fig, "_suptitle", None) is not None:
        add(fig._suptitle)
    for lg in fig.legends:
        out.append(("legend", lg.get_window_extent(r)))
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        for t in (ax.title, ax._left_title, ax._right_title, ax.xaxis.label, ax.yaxis.label):
            add(t)
        for axis, lim in ((ax.xaxis, ax.get_xlim()), (ax.yaxis, ax.get_ylim())):
            for tick in axis.get_major_ticks():
                if _in_view(axis, tick.get_loc(), lim):
                    add(tick.label1)
                    add(tick.label2)
        for t in ax.texts:
            add(t)
        lg = ax.get_legend()
        if lg is not None:
            out.append(("legend", lg.get_window_extent(r)))
    return out


def assert_readable(fig, what: str, solid=()):
    """No text leaves the figure or overlaps another text or one of the ``solid`` axes."""
    boxes = text_boxes(fig)
    assert boxes, what
    r = fig.canvas.get_renderer()
    for ax in solid:        # e.g. the colour bar: no tick label of the map hides under it
        b = ax.get_window_extent(r)
        own = [t.get_window_extent(r).bounds for t in ax.get_yticklabels() + ax.get_xticklabels()]
        for text, tb in boxes:
            if tb.bounds in own:          # the colour bar's own tick labels
                continue
            ox = min(b.x1, tb.x1) - max(b.x0, tb.x0)
            oy = min(b.y1, tb.y1) - max(b.y0, tb.y0)
            assert not (ox > 1 and oy > 1), f"{what}: {text!r} lies under the colour bar"
    W, H = fig.bbox.width, fig.bbox.height
    for text, b in boxes:       # nothing cut off at the figure's edge
        assert b.x0 >= -1 and b.y0 >= -1 and b.x1 <= W + 1 and b.y1 <= H + 1, \
            f"{what}: {text!r} leaves the figure ({b.bounds}, figure {W:.0f} x {H:.0f})"
    for i, (t1, b1) in enumerate(boxes):
        for t2, b2 in boxes[i + 1:]:
            overlap_x = min(b1.x1, b2.x1) - max(b1.x0, b2.x0)
            overlap_y = min(b1.y1, b2.y1) - max(b1.y0, b2.y0)
            assert not (overlap_x > 1 and overlap_y > 1), \
                f"{what}: {t1!r} overlaps {t2!r}"


def is_round_step(step: float) -> bool:
    """1, 2, 2.5 or 5 x 10^k."""
    k = math.floor(math.log10(step))
    m = step / 10 ** k
    return any(abs(m - r) < 1e-6 for r in (1, 2, 2.5, 5, 10))


def assert_round_colour_bar(cax, signed: bool, what: str):
    lo, hi = sorted(cax.get_ylim())
    ticks = [t for t in cax.get_yticks() if lo - 1e-9 * (hi - lo) <= t <= hi + 1e-9 * (hi - lo)]
    assert len(ticks) >= 3, what
    steps = np.diff(ticks)
    assert np.allclose(steps, steps[0], rtol=1e-6), what
    assert is_round_step(steps[0]), f"{what}: tick step {steps[0]}"
    assert np.allclose(np.round(np.array(ticks) / steps[0]), np.array(ticks) / steps[0]), what
    assert nice_limit(hi) == pytest.approx(hi), f"{what}: upper limit {hi} is not round"
    if signed:
        assert lo == pytest.approx(-hi), what
        assert any(abs(t) < 1e-9 * hi for t in ticks), f"{what}: zero is not a tick"


def test_round_step_helper_can_fail():
    assert is_round_step(250) and is_round_step(0.05) and is_round_step(2.5e-3)
    assert not is_round_step(300) and not is_round_step(0.7) and not is_round_step(1.5)


def test_overlap_helper_catches_overlaps():
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(3, 2))
    FigureCanvasAgg(fig)
    fig.text(0.1, 0.5, "a label")
    fig.text(0.15, 0.5, "another label")
    with pytest.raises(AssertionError, match="overlaps"):
        assert_readable(fig, "test")
    fig2 = Figure(figsize=(3, 2))
    FigureCanvasAgg(fig2)
    fig2.text(0.8, 0.5, "runs off the right edge")
    with pytest.raises(AssertionError, match="leaves the figure"):
        assert_readable(fig2, "test")


# --------------------------------------------------------------------------
# the maps of a solved mesa (hexahedra) and of a tetrahedral body
# --------------------------------------------------------------------------
def _tet_source():
    from skfem import MeshHex

    x = np.linspace(-300.0, 300.0, 9)
    z = np.linspace(-120.0, 40.0, 9)
    m = MeshHex.init_tensor(x, x, z).to_meshtet()
    centre = m.p[:, m.t].mean(axis=1)
    region = (centre[2] > 0).astype(int)
    region[(centre[2] > 0) & (np.abs(centre[0]) > 150)] = -1
    keep = region >= 0
    t = m.t[:, keep]
    sig = np.zeros((t.shape[1], 3, 3))
    c = centre[:, keep]
    sig[:, 0, 0] = np.where(region[keep] == 1, -1600.0 + 3 * np.abs(c[0]), 200.0 - c[2])
    sig[:, 1, 1] = 0.5 * sig[:, 0, 0]
    return FieldSource(m.p, t, region[keep], np.ones(t.shape[1]),
                       {"displacement": np.zeros((m.p.shape[1], 3))},
                       {"stress": sig, "strain": sig * 1e-5})


@pytest.mark.parametrize("view", ["section", "section_x", "plan", "edge"])
@pytest.mark.parametrize("name", ["stress_xx", "von_mises", "stress_xz", "displacement_z"])
def test_maps_of_a_mesa_read_right(small_mesa_result, view, name):
    from mesastrain.io.folder import _map_source

    src = _map_source(small_mesa_result)
    fig = build_map(src, name, view)
    what = f"{name} {view}"
    assert_readable(fig, what, solid=[fig.axes[1]])
    ax, cax = fig.axes[0], fig.axes[1]
    assert_round_colour_bar(cax, describe(name).signed, what)
    # the caption is the quantity in words with its unit, never the field name
    caption = fig.texts[0].get_text()
    assert describe(name).title in caption.replace("\n", " ") and name not in caption
    assert ax.get_xlabel().endswith("(nm)") and ax.get_ylabel().endswith("(nm)")


@pytest.mark.parametrize("view", ["section", "plan"])
def test_maps_of_a_tetrahedral_body_read_right(view):
    src = _tet_source()
    fig = build_map(src, "stress_xx", view, position=20.0 if view == "plan" else None)
    assert_readable(fig, f"tet {view}", solid=[fig.axes[1]])
    assert_round_colour_bar(fig.axes[1], True, f"tet {view}")


def test_a_field_defined_only_in_the_substrate_gets_its_own_colour_limits():
    # band-gap change of an InGaAs layer without deformation potentials: grey in the layer,
    # and the substrate's values (here up to 17 meV) set the scale, not a default of 1
    src = _tet_source()
    gap = np.where(src.region == 1, np.nan, -0.017)
    src.cell_data["band_gap_shift"] = gap
    fig = build_map(src, "band_gap_shift", "section")
    assert_readable(fig, "substrate-only field", solid=[fig.axes[1]])
    assert fig.axes[1].get_ylim()[1] == pytest.approx(20.0)
    assert "in the picture" in fig.texts[1].get_text().replace("\n", " ")


def test_device_maps_read_right_and_say_what_they_show(small_mesa_result):
    from mesastrain.io.folder import _map_source

    src = _map_source(small_mesa_result)
    maps = {png: kw for d in small_mesa_result.derived for png, kw in d.section_maps.items()}
    assert "device_map_raman_shift.png" in maps
    for png, kw in maps.items():
        fig = build_map(src, kw["quantity"], "section", depth=kw.get("depth"),
                        note=kw.get("note"), words=kw.get("words"), valid=kw.get("valid"))
        assert_readable(fig, png)
        assert_round_colour_bar(fig.axes[1], True, png)
        caption = fig.texts[0].get_text().replace("\n", " ")
        assert "piezo_" not in caption and "_long" not in caption, caption
        if kw["quantity"].startswith("piezo_"):
            assert "Δρ/ρ" in caption and "-type" in caption and "(%)" in caption
            assert fig.axes[1].get_ylim()[1] <= 20.0        # colours stop at the valid range


def test_plots_of_the_readouts_read_right(small_mesa_result, tmp_path, monkeypatch):
    """edge_relaxation.png, interface_tractions.png and the stack drawing."""
    import json

    from matplotlib.figure import Figure

    from mesastrain.io.folder import summary_of
    from mesastrain.io.report_sections import draw_stack

    seen = {}

    def record(self, path, *a, **k):
        seen[str(path).rsplit("/", 1)[-1]] = self

    monkeypatch.setattr(Figure, "savefig", record)
    for d in small_mesa_result.derived:
        for name, writer in d.files.items():
            if name.endswith(".png"):
                writer(tmp_path / name)
    summary = json.loads(json.dumps(summary_of(small_mesa_result), default=lambda o: o.tolist()))
    draw_stack(summary, tmp_path / "stack.png")
    assert {"edge_relaxation.png", "interface_tractions.png", "stack.png"} <= set(seen)
    for name, fig in seen.items():
        assert_readable(fig, name)
        words = " ".join(t for t, _ in text_boxes(fig))
        assert "sigma_" not in words and "_" not in words.replace(
            summary["layers"][1]["name"], ""), f"{name}: raw identifier in {words!r}"


def test_line_cut_plot_reads_right():
    from mesastrain.case.schema import FIELD_COMPONENTS
    from mesastrain.derived.cuts import cut_figure

    dist = np.linspace(0.0, 120.0, 61)
    region = np.where(dist < 30, 2, np.where(dist < 60, 1, 0))
    labels = {0: "substrate: Si", 1: "layer 1: Si0.7Ge0.3", 2: "layer 2: Si"}
    comps = {n: np.sin(dist / 20.0 + i) * (1e-3 if n.startswith("strain") else 500.0)
             for i, n in enumerate(FIELD_COMPONENTS)}
    chosen = ["stress_xx", "stress_zz", "von_mises", "strain_xx", "displacement_z"]
    fig = cut_figure("cut c: (0, 0, 40) to (0, 0, -80) nm", dist, region, labels, comps, chosen)
    assert_readable(fig, "line cut")
    legend = [t.get_text() for ax in fig.axes for t in ax.get_legend().get_texts()]
    assert "stress σxx" in legend and "von Mises stress" in legend
    assert not any("_" in t for t in legend)


# --------------------------------------------------------------------------
# the words table
# --------------------------------------------------------------------------
def test_quantity_words_and_units():
    assert describe("stress_xx").title == "stress σxx (MPa)"
    assert describe("strain_yz").title == "elastic strain εyz"
    assert describe("von_mises").title == "von Mises stress (MPa)" and not describe(
        "von_mises").signed
    q = describe("band_gap_shift")
    assert q.unit == "meV" and q.scale == 1000.0
    assert describe("piezo_n_x_long").title == \
        "resistivity change Δρ/ρ along the current, channel n_x (%)"
    assert describe("raman_shift").unit == "cm⁻¹"
    assert valley_words("delta_x+delta_y") == "Δ[100], Δ[010]"
    assert parameter_words("piezo.n-Si.pi11") == ("piezoresistance, n-Si",
                                                  "piezoresistance coefficient π11", "10⁻¹¹/Pa")


def test_report_draws_missing_maps_once(small_mesa_run, tmp_path):
    """A folder without maps (run --quick) gets them from fields.vtu; existing ones are
    embedded, never drawn again."""
    import json
    import shutil

    from mesastrain.io.report import write_report

    for name in ("summary.json", "fields.vtu"):
        shutil.copy(small_mesa_run.out / name, tmp_path / name)
    maps = json.loads((tmp_path / "summary.json").read_text())["case"]["output"]["maps"]
    write_report(tmp_path)
    drawn = {p.name: p.stat().st_mtime_ns for p in tmp_path.glob("map_*.png")}
    assert {f"map_section_{m}.png" for m in maps} <= set(drawn)
    write_report(tmp_path)
    assert {p.name: p.stat().st_mtime_ns for p in tmp_path.glob("map_*.png")} == drawn
    assert (tmp_path / "report.html").read_text().count("<img ") >= len(drawn)
