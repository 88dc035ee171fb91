"""The terminal's table of headline figures: short by default, every row on request."""

from mesastrain.cli.headline_table import headline_table


def _row(name, kind, value=1.0, unit="MPa", singular=False):
    bar = {"error": 0.5, "relative": 0.01}
    return {"name": name, "value": value, "unit": unit, "kind": kind, "singular": singular,
            "discretisation_error": None if singular else bar,
            "material_scatter": {"error": None, "singular": True} if singular else
            {"error": 0.2, "dominant": "film C_ij", "contributions": {"film C_ij": 0.2}}}


SUMMARY = {"headline": [
    _row("film centre sxx", "centre"),
    _row("interface film/substrate peel peak", "interface", singular=True),
    *[_row(f"probe p{i} {c}", "probe") for i in range(3)
      for c in ("sxx", "syy", "szz", "von_mises")],
    _row("probe p0 Raman shift", "raman", unit="cm⁻¹"),
], "material_scatter": {"figures": {}}}


def test_short_form_leaves_out_the_probe_components_and_counts_them():
    text = headline_table(SUMMARY)
    assert "probe p1 von Mises" in text and "probe p0 Raman shift" in text
    assert "probe p1 σxx" not in text and "probe p2 σzz" not in text
    assert "9 more rows" in text
    assert "film centre σxx" in text and "singular" in text


def test_full_form_has_every_row():
    text = headline_table(SUMMARY, full=True)
    for c in ("σxx", "σyy", "σzz", "von Mises"):
        assert f"probe p2 {c}" in text
    assert "more rows" not in text
    assert headline_table({"headline": []}) == ""
