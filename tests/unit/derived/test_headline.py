"""The headline figures: names, order, values taken from the providers' summaries."""

import numpy as np

from mesastrain.derived import PROVIDERS, headline
from mesastrain.derived.headline import Figure, headline_figures, merged_summary
from mesastrain.run.result import Derived


def test_headline_is_the_last_provider():
    assert PROVIDERS[-1] is headline.derive


def test_figures_come_from_the_readouts_and_probes(small_mesa_result):
    res = small_mesa_result
    figs = headline_figures(res)
    names = [f.name for f in figs]
    assert len(names) == len(set(names)), "figure names must be unique"
    by = {f.name: f for f in figs}
    s = merged_summary(res)
    name = res.layers[1].name
    layer = s["readouts"]["layers"][name]
    # the centre stress figure is the readout's centre stress, not a copy of another number
    c = np.asarray(layer["centre_stress"])
    assert by[f"{name} centre sxx"].value == float(c[0, 0])
    assert by[f"{name} centre sxx"].unit == "MPa"
    # each probe's normal stresses in sample axes
    p = res.probes[0]
    assert by[f"probe {p['name']} szz"].value == float(np.asarray(p["stress"])[2, 2])
    # interface peaks at a free edge are singular; stand-off values are not
    kinds = {f.kind for f in figs}
    assert {"centre", "standoff", "interface", "probe"} <= kinds
    assert all(f.singular for f in figs if f.kind == "interface")
    assert not any(f.singular for f in figs if f.kind in ("standoff", "centre", "probe"))


def test_standoff_figures_keep_the_worst_side(small_mesa_result):
    res = small_mesa_result
    s = merged_summary(res)
    figs = {f.name: f for f in headline_figures(res) if f.kind == "standoff"}
    for edge in s["readouts"]["edges"]:
        base = headline._without_side(edge["name"])
        for region, v in edge["values"].items():
            f = figs[f"standoff {base} {region} von_mises"]
            # the worst side, up to the tie tolerance between mirror images (TIE, relative)
            assert abs(f.value) >= abs(v["von_mises"]) * (1 - 2 * headline.TIE)


def test_mirror_images_keep_the_first_position(small_mesa_result):
    """Equal values (to round-off) at mirror-image corners: the position quoted is the
    first one read, whichever image is larger by round-off."""
    import dataclasses

    res = small_mesa_result
    figs = [f for f in headline_figures(res) if f.kind == "standoff"]
    assert figs
    readouts = next(d.summary["readouts"] for d in res.derived if "readouts" in d.summary)
    edge = readouts["edges"][0]
    base = headline._without_side(edge["name"])
    region, v = next(iter(edge["values"].items()))
    twin = dict(edge, values={region: dict(v, at=[-x for x in v["at"]],
                                           von_mises=v["von_mises"] * (1 + 1e-12))})
    fake = dataclasses.replace(res, derived=[d for d in res.derived if "readouts" not in
                                             d.summary])
    fake.derived.append(type(res.derived[0])(summary={"readouts": dict(
        readouts, edges=[edge, twin])}))
    f = next(f for f in headline_figures(fake)
             if f.name == f"standoff {base} {region} von_mises")
    assert list(f.at) == list(v["at"])


def test_contributions_are_attached_by_name(small_mesa_result):
    res = small_mesa_result
    name = headline_figures(res)[0].name
    fake = Derived(summary={"discretisation_error": {"figures": {name: {"error": 1.5}}}})
    res2 = type(res)(**{**res.__dict__, "derived": [*res.derived, fake]})
    rows = headline.derive(res2).summary["headline"]
    assert rows[0]["discretisation_error"] == {"error": 1.5}
    assert "discretisation_error" not in rows[1]
    # the material-data scatter provider (derived.scatter) runs before headline.derive
    scatter = merged_summary(res)["material_scatter"]["figures"]
    assert rows[0]["material_scatter"] == scatter[name]
    assert set(Figure.__dataclass_fields__) <= set(rows[0])


def test_figure_words_reads_names_without_changing_them():
    assert headline.figure_words("standoff SiGe/substrate edge SiGe von_mises") == \
        "stand-off SiGe/substrate edge SiGe von Mises"
    assert headline.figure_words("SiGe centre sxx") == "SiGe centre σxx"
    # whole words only: a region called "sxx_cap" keeps its name
    assert headline.figure_words("sxx_cap centre syy") == "sxx_cap centre σyy"
