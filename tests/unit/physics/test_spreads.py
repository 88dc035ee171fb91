"""Published spreads of the material data (materials.toml ``spread`` tables)."""

import numpy as np
import pytest

from mesastrain.errors import MaterialError
from mesastrain.physics.material_record import Spread, varied
from mesastrain.physics.materials import builtin_materials, get_material, material_from_table


def test_gaas_two_standard_sources():
    # Vurgaftman, Meyer & Ram-Mohan, J. Appl. Phys. 89, 5815 (2001): 122.1/56.6/60.0 GPa;
    # McSkimin, Jayaraman & Andreatch, J. Appl. Phys. 38, 2362 (1967): 118.8/53.7/59.4 GPa
    # (REFERENCES.md 1b): C11 differs by 2.8 %, C12 by 5.4 % (relative to the second source)
    m = get_material("GaAs")
    s = m.spread("stiffness")
    assert s.kind == "second source" and "McSkimin" in s.source
    c = m.constants
    assert -s.delta["C11"] / (c["C11"] + s.delta["C11"]) == pytest.approx(0.028, abs=5e-4)
    assert -s.delta["C12"] / (c["C12"] + s.delta["C12"]) == pytest.approx(0.054, abs=5e-4)


def test_alas_spread_four_to_nine_percent():
    # Adachi 1985 via Ioffe NSM (REFERENCES.md 1b) against Vurgaftman et al. 2001
    m = get_material("AlAs")
    rel = [abs(d) / m.constants[k] for k, d in m.spread("stiffness").delta.items()]
    assert 0.035 < min(rel) and max(rel) < 0.09


def test_sige_lattice_law_spread_is_vegard_minus_dismukes():
    # Vegard's law a = (1-x) a_Si + x a_Ge against the Dismukes, Ekstrom & Paff (1964) fit
    # 5.431 + 0.1992 x + 0.02733 x^2 A (REFERENCES.md 1c)
    si, ge = get_material("Si"), get_material("Ge")
    for x in (0.1, 0.3, 0.7):
        m = get_material("SiGe", x)
        s = m.spread("lattice law")
        assert s.kind == "law"
        vegard = (1 - x) * si.a + x * ge.a
        assert m.a + s.delta["a"] == pytest.approx(vegard, rel=1e-12)
        assert varied(m, s, 1.0).a == pytest.approx(vegard, rel=1e-12)


def test_alloy_stiffness_spread_mixes_the_members():
    si, ge = get_material("Si"), get_material("Ge")
    x = 0.3
    s = get_material("SiGe", x).spread("stiffness")
    for k in ("C11", "C12", "C44"):
        want = (1 - x) * si.spread("stiffness").delta[k] + x * ge.spread("stiffness").delta[k]
        assert s.delta[k] == pytest.approx(want, rel=1e-12)


def test_deposited_film_range_is_half_width():
    # PECVD SiNx: E 150-250 GPa by recipe (REFERENCES.md, real-stack materials, from memory)
    m = get_material("SiN-PECVD")
    s = m.spread("stiffness")
    assert s.kind == "range" and s.delta == {"E": 50.0}
    assert s.relative(m) == pytest.approx(0.25)
    v = varied(m, s, 1.0)
    assert v.constants["E"] == 250.0 and v.constants["nu"] == m.constants["nu"]
    assert v.stiffness[0, 0] > m.stiffness[0, 0]


def test_every_spread_has_a_source_and_a_flag():
    n = 0
    for name in builtin_materials():
        try:
            m = get_material(name)
        except MaterialError:
            m = get_material(name, 0.5)
        for s in m.spreads:
            n += 1
            assert isinstance(s, Spread) and s.source
            assert "[" in s.source or "common practice" in s.source
            assert s.relative(m) > 0
    assert n >= 15


def test_varied_moves_only_its_quantity():
    m = get_material("GaAs")
    s = m.spread("stiffness")
    v = varied(m, s, 0.5)
    assert v.a == m.a and v.alpha == m.alpha
    assert v.constants["C12"] == pytest.approx(m.constants["C12"] + 0.5 * s.delta["C12"])
    assert np.allclose(v.stiffness[0, 1], v.constants["C12"])
    assert np.allclose(varied(m, s, 0.0).stiffness, m.stiffness)


def test_user_material_spread_and_errors():
    base = {"system": "cubic", "C11": 160.0, "C12": 62.0, "C44": 78.0, "a": 5.46,
            "alpha": 3.0}
    m = material_from_table("film", {**base, "spread": {
        "stiffness": {"C11": 170.0, "source": "own"}, "lattice": {"a": 5.47, "source": "own"},
        "alpha": {"alpha": [2.0, 4.0], "source": "own"}}})
    assert m.spread("stiffness").delta == {"C11": 10.0}
    assert m.spread("lattice").delta["a"] == pytest.approx(0.01)
    assert m.spread("alpha").delta["alpha"] == (1.0,)
    bad = [({"stiffness": {"C13": 1.0, "source": "s"}}, "stiffness.C13 is not a constant"),
           ({"stiffness": {"C11": 170.0}}, "source string"),
           ({"poisson": {"nu": 0.3, "source": "s"}}, "poisson is not a quantity"),
           ({"stiffness": {"C11": [180.0, 170.0], "source": "s"}}, "low < high"),
           ({"stiffness": {"C11": "x", "source": "s"}}, "must be a number"),
           ({"stiffness": {"C11": 170.0, "C12": [60.0, 64.0], "source": "s"}}, "mixes")]
    for spread, text in bad:
        with pytest.raises(MaterialError, match="material.film.spread") as err:
            material_from_table("film", {**base, "spread": spread})
        assert text in str(err.value)
