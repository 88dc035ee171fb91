"""``mesastrain verify``: published-solution checks run on the user's machine.

Every check solves or evaluates something with this installation and compares
it with a published value (or a published closed form evaluated with stated
inputs), naming the source. The command prints a table

    quantity | published value and source | computed | error | pass

and exits 0 when every row passes, 1 otherwise. The checks are small (about
half a minute in all on two cores).

The check groups are the explicit list :data:`CHECKS` of functions
``check() -> list[Check]``.
"""

from __future__ import annotations

import json
import sys
import time
from collections.abc import Callable
from dataclasses import asdict

import numpy as np

from mesastrain.cli.common import EXIT_FAILED
from mesastrain.cli.verify_row import Check, _case  # noqa: F401 (Check re-exported)
from mesastrain.cli.verify_stack import check_le11, check_liner, check_stack
from mesastrain.units import fmt


def _blanket_film_stress(case) -> tuple[np.ndarray, np.ndarray, object]:
    """FE stress and elastic strain at mid-film of a blanket case, and the layer model."""
    from mesastrain.run.pipeline import run_case

    res = run_case(case)
    lm = res.layers[1]
    z = 0.5 * (lm.z_bottom + lm.z_top)
    strain, stress, _, _ = res.sample(np.array([[0.0, 0.0, z]]))
    return stress[0], strain[0], lm


# --------------------------------------------------------------------------
# checks
# --------------------------------------------------------------------------
def check_blanket() -> list[Check]:
    """Blanket films on (001) and (111): FE stress against the closed-form biaxial moduli."""
    from mesastrain.physics.thinfilm import (
        biaxial_modulus_001,
        biaxial_modulus_111,
        poisson_ratio_perp_001,
    )

    out = []
    case = _case("Si", {"material": "SiGe", "x": 0.2, "thickness": 20})
    s, e, lm = _blanket_film_stress(case)
    s001 = s
    c = lm.material.constants
    m001 = float(biaxial_modulus_001(c["C11"], c["C12"]))
    out.append(Check("Si0.8Ge0.2 on Si(001): sigma_xx / eps_xx (GPa)", m001,
                     "M(001) = C11 + C12 - 2 C12^2/C11 (Brantley, J. Appl. Phys. 44, 534, 1973) "
                     "with the table's SiGe constants", s[0, 0] / e[0, 0] / 1000.0, 1e-3,
                     kind="implementation"))
    out.append(Check("Si0.8Ge0.2 on Si(001): eps_zz / eps_xx (1)",
                     float(poisson_ratio_perp_001(c["C11"], c["C12"])),
                     "-2 C12/C11 for a (001) film (closed form of the traction-free top; "
                     "Brantley 1973 constants convention)", e[2, 2] / e[0, 0], 1e-3,
                     kind="implementation"))
    case = _case("Si", {"material": "SiGe", "x": 0.2, "thickness": 20}, normal=(1, 1, 1),
                 x_axis=(1, -1, 0))
    s, e, lm = _blanket_film_stress(case)
    m111 = float(biaxial_modulus_111(c["C11"], c["C12"], c["C44"]))
    out.append(Check("Si0.8Ge0.2 on Si(111): sigma_xx / eps_xx (GPa)", m111,
                     "M(111) = 6 C44 (C11 + 2 C12)/(C11 + 2 C12 + 4 C44), isotropic in {111} "
                     "(Brantley 1973)", s[0, 0] / e[0, 0] / 1000.0, 1e-3,
                     kind="implementation"))
    out.append(Check("Si0.8Ge0.2 on Si(001): signed film stress sigma_xx (GPa), compressive",
                     -1.4, SIGE_STRESS_SOURCE, s001[0, 0] / 1000.0, 0.0,
                     low=SIGE_STRESS_GPA[0], high=SIGE_STRESS_GPA[1]))
    return out + check_low_symmetry()


#: Published range of the biaxial stress of pseudomorphic Si0.8Ge0.2 on Si(001), GPa.
SIGE_STRESS_GPA = (-1.55, -1.2)
SIGE_STRESS_SOURCE = (
    "compressive: the larger SiGe lattice is squeezed onto Si (People & Bean 1985; Freund & "
    "Suresh, Thin Film Materials, 2003, from memory); size: misfit 0.75 % (Dismukes et al., "
    "J. Phys. Chem. 68, 3021, 1964) to 0.83 % (Vegard, 4.18 % x) times the biaxial modulus "
    "of Si(001), 180.5 GPa (Brantley 1973), and of Si0.8Ge0.2, about 170 GPa: -1.27 to -1.5 "
    "GPa, from memory; range check")


def check_low_symmetry() -> list[Check]:
    """A coherent film on GaAs(311): traction-free (sigma_i3 = 0) and sheared, as the closed form."""
    from mesastrain.physics.thinfilm import biaxial_response

    case = _case("GaAs", {"material": "InGaAs", "x": 0.1, "thickness": 20}, normal=(3, 1, 1),
                 x_axis=(0, 1, -1))
    s, _, lm = _blanket_film_stress(case)
    e0 = lm.eigenstrain_sample
    ref, _ = biaxial_response(lm.stiffness_sample, -e0[0, 0], -e0[1, 1], -e0[0, 1])
    ref = ref * 1000.0
    scale = float(np.abs(ref).max())
    return [
        Check("In0.1Ga0.9As on GaAs(311), x = [01-1]: max |sigma_i3| / max |sigma| (1)", 0.0,
              "traction-free surface of a laterally infinite coherent film (REFERENCES.md, "
              "film shear on low-symmetry wafers [D]); rollers gave 3.5e-2",
              float(np.abs(s[:, 2]).max()) / scale, 1e-4, absolute=True),
        Check("In0.1Ga0.9As on GaAs(311): sigma_yy (MPa)", float(ref[1, 1]),
              "closed form: in-plane strain locked to GaAs, sigma_i3 = 0, table constants "
              "(biaxial_response); rollers gave 3.6 % error", float(s[1, 1]), 1e-3,
              kind="implementation"),
    ]


def check_rotation() -> list[Check]:
    """Rotated stiffness of Si against published numbers."""
    from mesastrain.physics.crystal import sample_frame
    from mesastrain.physics.materials import get_material

    si = get_material("Si")
    fr = sample_frame((0, 0, 1), (1, 1, 0))
    c = fr.stiffness_to_sample(si.stiffness)
    S = np.linalg.inv(c)
    return [
        Check("Si C11 in axes [110], [-110], [001] (GPa)", 194.4,
              "memsnet MEMS-Talk 324 (rounded Si matrix rotated 45 deg); (C11+C12+2C44)/2 with "
              "Hopcroft, Nix & Kenny, J. MEMS 19, 229 (2010) constants", c[0, 0], 2e-3),
        Check("Si Young's modulus along <110> (GPa)", 169.0,
              "Hopcroft, Nix & Kenny, J. MEMS 19, 229 (2010)", 1.0 / S[0, 0], 5e-3),
    ]


def check_bow() -> list[Check]:
    """Free-standing wafer curvature (FE) against Stoney and Timoshenko."""
    from mesastrain.derived.bow import biaxial_modulus, free_plate_curvature
    from mesastrain.model.regions import build_layers
    from mesastrain.physics.thinfilm import stoney_curvature, timoshenko_curvature

    out = []
    for m, which in ((1e-3, "stoney"), (0.1, "timoshenko")):
        hs = 1e4
        case = _case("Si", {"material": "SiGe", "x": 0.2, "thickness": m * hs}, x_axis=(1, 1, 0),
                     thickness=hs)
        layers = build_layers(case)
        stiff = [lm.stiffness_sample for lm in layers]
        eig = [lm.eigenstrain_sample for lm in layers]
        r = free_plate_curvature(stiff, eig, [-hs, 0.0], [0.0, m * hs])
        Ms, Mf = biaxial_modulus(stiff[0]), biaxial_modulus(stiff[1])
        eps = -layers[1].eigenstrain_sample[0, 0]
        if which == "stoney":
            ref = float(stoney_curvature(Mf * eps * 1e3, m * hs, hs, Ms))
            out.append(Check(f"wafer curvature, Si0.8Ge0.2 on Si(001), h_f/h_s = {m:g} (1/m)",
                             ref, "Stoney, Proc. R. Soc. Lond. A 82, 172 (1909), blanket film "
                             "stress, biaxial moduli", r["mean"], 0.02, kind="implementation"))
            # signed: a compressive film bends its wafer film side convex, negative in the
            # tool's convention (film side concave positive); size from the published stress
            # range and Stoney with the published Si(001) biaxial modulus 180.5 GPa
            lo_k, hi_k = (float(stoney_curvature(sg * 1e3, m * hs, hs, 180.5))
                          for sg in SIGE_STRESS_GPA)
            out.append(Check(f"signed wafer curvature, Si0.8Ge0.2 on Si(001), h_f/h_s = {m:g} "
                             f"(1/m), film side convex", 0.5 * (lo_k + hi_k),
                             "Stoney 1909 with the published SiGe stress range (row of the "
                             "blanket group) and M_Si(001) = 180.5 GPa (Brantley 1973); "
                             "compressive film -> convex film side (Freund & Suresh 2003, "
                             "from memory); range check", r["mean"], 0.0, low=min(lo_k, hi_k),
                             high=max(lo_k, hi_k)))
        else:
            ref = float(timoshenko_curvature(eps, m * hs, hs, Mf, Ms))
            out.append(Check(f"wafer curvature, Si0.8Ge0.2 on Si(001), h_f/h_s = {m:g} (1/m)",
                             ref, "Timoshenko, J. Opt. Soc. Am. 11, 233 (1925), bimetal formula "
                             "with biaxial moduli", r["mean"], 0.03, kind="implementation"))
    return out


def check_thermal() -> list[Check]:
    """Relaxed Ge on Si cooled from growth: FE in-plane strain."""
    from mesastrain.physics.materials import get_material

    case = _case("Si", {"material": "Ge", "thickness": 50, "relaxed": 1.0},
                 thermal={"growth_temperature": "700 C", "final_temperature": "20 C"})
    s, e, lm = _blanket_film_stress(case)
    ge, si = get_material("Ge"), get_material("Si")
    closed = (ge.alpha[0] - si.alpha[0]) * 1e-6 * 680.0
    return [
        Check("relaxed Ge on Si(001), 700 C -> 20 C: in-plane strain (1)", closed,
              f"(alpha_Ge - alpha_Si) (T_growth - T_final) with alpha_Ge = {ge.alpha[0]:g} (Ioffe "
              f"NSM) and alpha_Si = {si.alpha[0]:g} 1e-6/K (Okada & Tokumaru, J. Appl. Phys. 56, "
              f"314, 1984, at 300 K)", e[0, 0], 0.01, kind="implementation"),
        Check("same, against the trade's figure (1)", 0.0025,
              "about +0.2 to +0.3 % tensile for Ge grown on Si (common practice)", e[0, 0],
              0.0, low=0.002, high=0.003),
        Check("GaN on Si(111), relaxed at 1050 C, cooled to 20 C: signed sigma_xx (GPa), "
              "tensile", 1.0,
              "tensile, the cause of cracking of GaN on Si above about 1 um (Dadgar et al., "
              "Jpn. J. Appl. Phys. 39, L1183, 2000; Krost & Dadgar, Phys. Status Solidi A "
              "194, 361, 2002; from memory); size 0.3 to 2 GPa, range check",
              float(gan_on_si_stress()), 0.0, low=0.3, high=2.0),
    ]


def gan_on_si_stress() -> float:
    """In-plane stress (GPa) of a 1 um GaN film relaxed at growth on Si(111), cooled."""
    case = _case("Si", {"material": "GaN", "thickness": 1000, "relaxed": 1.0,
                        "normal": [0, 0, 0, 1], "x_axis": [2, -1, -1, 0]},
                 normal=(1, 1, 1), x_axis=(1, -1, 0), thickness=5e5,
                 thermal={"growth_temperature": "1050 C", "final_temperature": "20 C"})
    s, _, _ = _blanket_film_stress(case)
    return s[0, 0] / 1000.0


def check_critical_thickness() -> list[Check]:
    """Matthews-Blakeslee and People-Bean values through the readouts."""
    from mesastrain.derived.energy import critical_thickness
    from mesastrain.model.regions import build_layers

    # REFERENCES.md 5d, set A: Dismukes a(x), f = (a_film - a_Si)/a_film, b = a_film/sqrt(2),
    # nu = 0.278; People-Bean with b = 0.4 nm, a = a_Si. Values derived from the formulas.
    published = {0.2: (13.7, 273.0), 0.3: (8.0, 101.0)}
    out = []
    for x, (mb, pb) in published.items():
        case = _case("Si", {"material": "SiGe", "x": x, "thickness": 5})

        class _R:  # the readout needs only the layers
            layers = build_layers(case)
        ct = critical_thickness(_R, _R.layers[1])
        out.append(Check(f"Matthews-Blakeslee h_c, Si{1 - x:g}Ge{x:g} on Si(001) (nm)", mb,
                         "Matthews & Blakeslee, J. Cryst. Growth 27, 118 (1974), single-layer "
                         "8 pi form, 60 deg dislocations, b = a/sqrt 2, nu = 0.278, Dismukes "
                         "a(x); value of the formula with these inputs",
                         ct["matthews_blakeslee"], 0.01, kind="implementation"))
        out.append(Check(f"People-Bean h_c, Si{1 - x:g}Ge{x:g} on Si(001) (nm)", pb,
                         "People & Bean, Appl. Phys. Lett. 47, 322 (1985), b = 0.4 nm, "
                         "a = 0.5431 nm; value of the formula with these inputs",
                         ct["people_bean"], 0.01, kind="implementation"))
    return out


def check_dislocations() -> list[Check]:
    """Straight-dislocation fields (isotropic closed form; anisotropic Stroh)."""
    from mesastrain.physics.crystal import sample_frame
    from mesastrain.physics.dislocations import (
        Dislocation,
        dislocation_from_crystal,
        energy_prefactor,
        isotropic_fields,
    )
    from mesastrain.physics.materials import get_material

    d = Dislocation(xi=(0, 0, 1), b=(1.0, 0, 0))
    s, _ = isotropic_fields(d, np.array([[1.0, 1.0, 0.0]]), 50.0, 0.3)
    fr = sample_frame((0, 0, 1), (1, 0, 0))
    d60 = dislocation_from_crystal((1, -1, 0), (1, 0, 1), 5.431, fr, burgers_fraction=0.5)
    si = get_material("Si")
    K = energy_prefactor(d60, fr.stiffness_to_sample(si.stiffness))
    return [
        Check("edge dislocation sigma_xx at (1, 1), mu = 50, nu = 0.3, b = 1", -11.3682,
              "Hirth & Lothe, Theory of Dislocations (1982), ch. 3; same value from atomman's "
              "Volterra solution", float(s[0, 0, 0]), 1e-4),
        Check("Si 60 deg dislocation energy prefactor K (GPa)", 80.23,
              "anisotropic Stroh solution as computed by atomman 1.5.4 (K_coeff); Stroh, "
              "Phil. Mag. 3, 625 (1958), from memory", K,
              2e-3),
    ]


def eshelby_sphere(nu: float = 0.25, eps_star: float = 0.01, n_in: int = 6) -> dict:
    """Spherical inclusion with a dilatational eigenstrain in a large isotropic block (FE).

    One octant of a cube of half-side 6a is modelled (x, y, z >= 0 mirror planes
    are exact for a centred sphere in an isotropic body); the outer faces are
    free. The eigenstrain of each brick is weighted by the fraction of its
    volume inside the sphere (4^3 sub-points).

    Returns
    -------
    dict
        ``interior_strain`` (mean total strain eps_xx inside r < a/2),
        ``radial_stress_2a`` (sigma_rr at r = 2a on the diagonal, unit mu),
        ``seconds``.
    """
    from skfem import MeshHex

    from mesastrain.fem.assembly import assemble
    from mesastrain.fem.discretisation import discretise
    from mesastrain.fem.fields import evaluate_at_points, recover
    from mesastrain.fem.solve import solve_condensed
    from mesastrain.mesh.grid import join_segments
    from mesastrain.physics.dislocations import isotropic_stiffness

    t0 = time.perf_counter()
    a, L, mu = 1.0, 6.0, 1.0
    g = join_segments([0.0, 1.3 * a, L], [None, a / n_in, None], [a / n_in, L], 1.35)
    mesh = MeshHex.init_tensor(g, g, g)
    nel = mesh.t.shape[1]
    # volume fraction inside the sphere from 4^3 sub-points per brick
    lo, hi = mesh.p[:, mesh.t].min(axis=1), mesh.p[:, mesh.t].max(axis=1)
    q = (np.arange(4) + 0.5) / 4
    sub = np.stack(np.meshgrid(q, q, q, indexing="ij"), axis=-1).reshape(-1, 3)     # (64, 3)
    pts = lo.T[:, None, :] + sub[None, :, :] * (hi - lo).T[:, None, :]
    frac = np.mean(np.sum(pts ** 2, axis=2) <= a * a, axis=1)
    cell_eig = frac[:, None, None] * eps_star * np.eye(3)
    c6 = isotropic_stiffness(mu, nu)
    group = np.zeros(nel, dtype=np.int32)
    disc = discretise(mesh, 1)
    K, f = assemble(disc, group, c6[None], np.zeros((1, 3, 3)), cell_eig)
    x = disc.doflocs
    tol = 1e-9 * L
    fixed = np.concatenate([np.flatnonzero(np.abs(x[k]) <= tol) * 3 + k for k in range(3)])
    u, _ = solve_condensed(K, f, np.unique(fixed), method="direct")
    fl = recover(disc, u, group, c6[None], np.zeros((1, 3, 3)), mesh.p.shape[1], mesh.t,
                 cell_eig)
    centres = mesh.p[:, mesh.t].mean(axis=1).T
    inner = np.linalg.norm(centres, axis=1) < 0.5 * a
    w = fl.cell_volume[inner]
    interior = float(np.sum(w * fl.cell_total_strain[inner, 0, 0]) / np.sum(w))
    r = 2.0 * a
    p = np.array([[r, r, r]]) / np.sqrt(3.0)
    el = np.array([int(np.flatnonzero(np.all((p[0] >= lo.T - 1e-12) & (p[0] <= hi.T + 1e-12),
                                              axis=1))[0])])
    _, sig, _ = evaluate_at_points(disc, u, el, p, group, c6[None], np.zeros((1, 3, 3)),
                                   cell_eig)
    n = p[0] / np.linalg.norm(p[0])
    srr = float(n @ sig[0] @ n) / 1000.0            # evaluate_at_points returns 1000 x unit
    return {"interior_strain": interior, "radial_stress_2a": srr, "unknowns": int(disc.ndofs),
            "seconds": time.perf_counter() - t0}


def check_eshelby() -> list[Check]:
    """Eshelby's spherical inclusion (finite elements with a per-element eigenstrain)."""
    nu, eps = 0.25, 0.01
    r = eshelby_sphere(nu, eps)
    gamma = (1 + nu) / (3 * (1 - nu))
    return [
        Check("Eshelby sphere, nu = 0.25: interior strain / eps* (1)", gamma,
              "Eshelby, Proc. R. Soc. A 241, 376 (1957): (1 + nu)/(3(1 - nu))",
              r["interior_strain"] / eps, 0.02),
        Check("Eshelby sphere: sigma_rr(2a) / (mu eps*) (1)", -4 * gamma / 8.0,
              "Eshelby 1957: sigma_rr = -4 mu gamma eps* (a/r)^3 outside",
              r["radial_stress_2a"] / eps, 0.05),
    ]


def check_raman() -> list[Check]:
    """Raman stress factors of Si: (001) against De Wolf, (110) by the selection rules."""
    from mesastrain.physics.crystal import sample_frame
    from mesastrain.physics.materials import get_material
    from mesastrain.physics.raman import raman_parameters, stress_factor

    p, si = raman_parameters("Si", "acc1990"), get_material("Si")
    f001 = stress_factor("uniaxial", p, si.stiffness, sample_frame((0, 0, 1), (1, 0, 0)).R)
    f110 = stress_factor("uniaxial", p, si.stiffness, sample_frame((1, 1, 0), (1, -1, 0)).R)
    return [
        Check("Si(001) backscattering, uniaxial stress per Raman shift (MPa per cm^-1)", -434.0,
              "De Wolf, Semicond. Sci. Technol. 11, 139 (1996), from memory; 1990 PDPs",
              f001, 0.01),
        Check("Si(110) backscattering, unpolarised, uniaxial along [1-10]: stress per Raman "
              "shift (MPa per cm^-1); implementation check", 1000.0 / ((2 * -2.878 - 2.305) / 3),
              "modes -2.878 and -2.305 cm^-1 per GPa (Anastassakis, Cantarero & Cardona, PRB "
              "41, 7529, 1990 PDPs; REFERENCES section 7, derived) seen with intensities 2:1, "
              "the [110] mode forbidden (Raman tensors of Loudon, Adv. Phys. 13, 423, 1964); "
              "formula evaluated with the tool's own PDPs", f110, 0.005, kind="implementation"),
    ]


#: Check groups, in the order of the table: functions returning a list of :class:`Check`.
CHECKS: list[Callable[[], list[Check]]] = [
    check_rotation, check_blanket, check_low_symmetry, check_thermal, check_critical_thickness, check_bow,
    check_eshelby, check_dislocations, check_raman, check_stack, check_le11, check_liner]


# --------------------------------------------------------------------------
# running and printing
# --------------------------------------------------------------------------
def run_checks(groups=None, progress=None) -> list[Check]:
    """Run every check group (or the named ones) and return the rows.

    ``progress(str)``, when given, is told which group runs (``group 3 of 9: stoney``) and
    how many rows have failed so far.
    """
    rows = []
    chosen = [fn for fn in CHECKS
              if not groups or fn.__name__.removeprefix("check_") in groups]
    for k, fn in enumerate(chosen, 1):
        if progress is not None:
            bad = sum(not r.passed for r in rows)
            progress(f"group {k} of {len(chosen)}: {fn.__name__.removeprefix('check_')} "
                     f"({len(rows)} rows done, {bad} failed)")
        rows.extend(fn())
    return rows


def _fmt(v: float) -> str:
    return fmt(v, ".6g") if np.isfinite(v) else str(v)


def format_table(rows: list[Check]) -> str:
    """The verification table as plain text."""
    lines = []
    for k, r in enumerate(rows, 1):
        if r.low is not None:
            pub = f"{_fmt(r.low)} .. {_fmt(r.high)}"
            err = "in range" if r.passed else "out of range"
        else:
            pub = _fmt(r.published)
            err = (f"{r.error:.2e}" if r.absolute else f"{100 * r.error:.3g} %")
            err += f" (limit {r.tolerance:.0e})" if r.absolute else \
                f" (limit {100 * r.tolerance:g} %)"
        tag = "  [implementation check]" if r.kind == "implementation" else ""
        lines.append(f"{k:2d}. {r.quantity}{tag}")
        lines.append(f"    published  {pub}   [{r.source}]")
        lines.append(f"    computed   {_fmt(r.computed)}   error {err}   "
                     f"{'PASS' if r.passed else 'FAIL'}")
    return "\n".join(lines)


def _plain(v):
    """numpy scalars (and anything else with ``item``) as plain Python values for JSON."""
    if hasattr(v, "item"):
        return v.item()
    raise TypeError(f"Object of type {type(v).__name__} is not JSON serializable")


def cmd_verify(args) -> int:
    from mesastrain.cli.run import Progress

    t = time.perf_counter()
    progress = Progress(sys.stderr.isatty() or getattr(args, "progress", False))
    rows = run_checks(args.only, progress=progress)
    if args.json:
        print(json.dumps([dict(asdict(r), error=r.error if np.isfinite(r.error) else None,
                               passed=r.passed) for r in rows], indent=1, default=_plain))
    else:
        print("mesastrain verify: published solutions recomputed on this machine")
        print(format_table(rows))
        bad = sum(not r.passed for r in rows)
        print(f"{len(rows) - bad} of {len(rows)} checks passed in "
              f"{time.perf_counter() - t:.0f} s")
    return 0 if all(r.passed for r in rows) else EXIT_FAILED


def add_command(subparsers) -> None:
    """``mesastrain verify [--only GROUP ...] [--json]``."""
    names = [fn.__name__.removeprefix("check_") for fn in CHECKS]
    p = subparsers.add_parser("verify", help="recompute published solutions and compare "
                                             "(trust an installation)")
    p.add_argument("--only", nargs="+", choices=names, metavar="GROUP",
                   help=f"run only these groups: {', '.join(names)}")
    p.add_argument("--json", action="store_true", help="print the rows as JSON")
    p.add_argument("--progress", action="store_true",
                   help="show which check group runs even when stderr is not a terminal")
    p.set_defaults(func=cmd_verify)
