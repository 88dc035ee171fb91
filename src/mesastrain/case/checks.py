"""Checks that combine tables: phase 2 of :func:`mesastrain.case.parse.parse_case`.

After each table has been read on its own (:mod:`mesastrain.case.schema`),
:class:`CrossChecks` checks what needs several of them: a layer inheriting the
substrate's orientation, the pattern against the stack (etch depth, corner
radius, sloped sidewalls, pitch), the modelled substrate depth, probes and line
cuts inside the modelled body, and misfit dislocations against layers and
pattern. The tables are the plain dicts of the first phase; a check may fill
in a value that depends on another table (a layer's orientation, a square
pitch). The first failing check raises :class:`mesastrain.errors.CaseError`.
"""

from __future__ import annotations

import math

from mesastrain.case.outline import outline_at, outline_of, taper_of
from mesastrain.case.schema import INSIDE_RTOL
from mesastrain.errors import CaseError, MesastrainError, OrientationError
from mesastrain.physics.crystal import direction_vector, sample_frame
from mesastrain.physics.materials import get_material
from mesastrain.physics.thermal import melting_point

__all__ = ["CrossChecks", "PatternView"]


class PatternView:
    """Attribute access to a pattern table being validated (as outline.outline_of expects)."""

    def __init__(self, t: dict):
        self._t = t

    def __getattr__(self, name):
        if name.startswith("_"):
            raise AttributeError(name)
        return self._t.get(name)



class CrossChecks:
    """The checks across tables of one case being parsed.

    Parameters
    ----------
    substrate : dict
        The read ``[substrate]`` with its resolved ``system``, ``c_over_a`` and ``label``.
    layers : list of dict
        The read ``[[layer]]`` tables, likewise resolved.
    pattern : dict
        The read ``[pattern]`` (``{"shape": "none"}`` when absent), with the
        defaults that depend on the stack (length, etch depth) filled in.
    mesh : dict
        The read ``[mesh]`` (possibly empty).
    """

    def __init__(self, substrate: dict, layers: list, pattern: dict, mesh: dict,
                 liners: list = ()):
        self.substrate = substrate
        self.layers = layers
        self.pattern = pattern
        self.mesh = mesh
        self.liners = list(liners)

    def liner_offsets(self) -> tuple:
        """Total liner thickness (top, horizontal sidewall offset, floor), nm; zeros if none.

        The sidewall thickness is measured normal to the sidewall; a wall at angle a
        from the substrate plane moves horizontally by thickness / sin(a).
        """
        angle = self.pattern.get("sidewall_angle") or 90.0
        sin_a = math.sin(math.radians(angle))
        top = math.fsum(t["thickness"] for t in self.liners)
        side = math.fsum(t.get("sidewall_thickness", t["thickness"]) for t in self.liners)
        floor = math.fsum(t.get("floor_thickness", t["thickness"]) for t in self.liners)
        return top, side / sin_a, floor

    def liners_fit(self, liners: list) -> None:
        """Liners need an etched feature, must leave the etch partly open and fit the gaps.

        Checked per liner, bottom to top, with the total thickness up to it: the floor
        liners stay below the feature's top edge (the floor thickness is less than the
        etch depth), the sidewall liners of neighbouring features of an array do not
        meet (twice the horizontal sidewall offset is less than the narrowest gap,
        pitch minus the feature width at its widest), the liners fit within a given
        ``margin``, and a sloped sidewall leaves a top outline of positive size.
        """
        p = self.pattern
        if not liners:
            return
        if p["shape"] == "none":
            raise CaseError("liner[0]", 'needs an etched feature to cover ([pattern] shape = '
                                        '"rectangle", "stripe", "disk" or "polygon"); a film '
                                        'over a blanket stack is a [[layer]]')
        if p["shape"] == "mesh":
            raise CaseError("liner[0]", "is not built on an imported mesh; draw the liner as "
                                        "a physical group of the mesh file instead")
        view = PatternView(p)
        top_ol = outline_of(view)
        taper = taper_of(view)
        foot = top_ol.offset(taper)
        widest = [max(a, b) for a, b in zip(top_ol.half_extent(), foot.half_extent())]
        angle = p.get("sidewall_angle") or 90.0
        sin_a = math.sin(math.radians(angle))
        etch = p["etch_depth"]
        t_top = s_h = f_tot = 0.0
        for i, t in enumerate(liners):
            key = f"liner[{i}]"
            side_key = (f"{key}.sidewall_thickness" if "sidewall_thickness" in t
                        else f"{key}.thickness")
            floor_key = f"{key}.floor_thickness" if "floor_thickness" in t else f"{key}.thickness"
            t_top += t["thickness"]
            s_h += t.get("sidewall_thickness", t["thickness"]) / sin_a
            f_tot += t.get("floor_thickness", t["thickness"])
            if f_tot >= etch:
                raise CaseError(floor_key, f"the floor liners reach {f_tot:.10g} nm up, as high "
                                           f"as the etch depth ({etch:.10g} nm) or more; the "
                                           f"etch must stay partly open (give thinner floor "
                                           f"liners)")
            pitch = p.get("pitch")
            if pitch is not None and pitch[1] is None and p["shape"] != "stripe":
                pitch = (pitch[0], pitch[0])        # as pattern_fits fills it in
            # the liner's outer outline at its foot and its top (a polygon's mitred corners
            # reach further out than the sidewall offset)
            reach = [max(a, b) for a, b in zip(
                foot.offset(s_h).half_extent(),
                top_ol.offset(s_h - taper * t_top / etch).half_extent())]
            for axis, name in ((0, "x"), (1, "y")):
                period = None if pitch is None else pitch[axis]
                if period is None or not math.isfinite(widest[axis]):
                    continue
                gap = period - 2.0 * widest[axis]
                if 2.0 * reach[axis] >= period:
                    raise CaseError(side_key, f"the sidewall liners, {s_h:.10g} nm thick "
                                              f"(horizontally) on each side, fill the "
                                              f"{gap:.10g} nm gap between the features along "
                                              f"{name} (pitch {period:.10g} nm); give less "
                                              f"than {gap / 2.0:.10g} nm in total")
            if p.get("margin") is not None and s_h >= p["margin"]:
                raise CaseError(side_key, f"the sidewall liners, {s_h:.10g} nm thick "
                                          f"(horizontally), do not fit in pattern.margin = "
                                          f"{p['margin']:.10g} nm; give a wider margin")
            if taper:
                above = top_ol.offset(s_h - taper * t_top / etch)
                inner = top_ol.offset(-taper * t_top / etch)
                problem = above.problem() or inner.problem()
                if problem:
                    raise CaseError(f"{key}.thickness",
                                    f"with the sidewall slope, the liner's sidewall does not "
                                    f"reach {t_top:.10g} nm above the feature top ({problem}); "
                                    f"give a thinner liner or a steeper sidewall")

    def dislocations(self, sets: list) -> None:
        """Interface index in range, line in the interface, a pattern the lines fit.

        ``sets`` are the read ``[[dislocation]]`` tables.
        """
        shape = self.pattern["shape"]
        for i, ds in enumerate(sets):
            ik = f"dislocation[{i}]"
            if ds["interface"] >= len(self.layers):
                raise CaseError(f"{ik}.interface", f"{ds['interface']} is not a layer's bottom "
                                                   f"interface; allowed: 0 to "
                                                   f"{len(self.layers) - 1}")
            if shape not in ("none", "rectangle", "stripe") or self.pattern.get(
                    "corner_radius") or self.pattern.get("sidewall_angle") not in (None, 90.0):
                raise CaseError(ik, "dislocations need a model of axis-aligned bricks: "
                                    "pattern shape \"none\", \"rectangle\" (no corner_radius, "
                                    "vertical sidewalls) or \"stripe\"")
            lay = self.layers[ds["interface"]]
            normal = lay["normal"] if lay["normal"] is not None else self.substrate["normal"]
            x_axis = lay["x_axis"] if lay["x_axis"] is not None else self.substrate["x_axis"]
            try:
                R = sample_frame(normal, x_axis, lay["system"], lay["c_over_a"]).R
                xi = R @ direction_vector(ds["line"], lay["system"], lay["c_over_a"],
                                          what="line direction")
            except OrientationError as err:
                raise CaseError(f"{ik}.line", str(err)) from None
            xi = xi / math.sqrt(float(xi @ xi))
            if abs(xi[2]) > 1e-6:
                ang = math.degrees(math.asin(min(1.0, abs(float(xi[2])))))
                raise CaseError(f"{ik}.line", f"{list(ds['line'])} makes {ang:.3g} deg with the "
                                              f"interface; misfit dislocations lie in the "
                                              f"interface plane")
            if shape == "stripe" and abs(xi[1]) < 1 - 1e-9:
                raise CaseError(f"{ik}.line", "a stripe is modelled as its x-z cross-section: "
                                              "only lines along the stripe (sample y) fit")
            if shape == "none" and "positions" in ds:
                raise CaseError(f"{ik}.positions", "a blanket film is modelled as a periodic "
                                                   "cell: give spacing or relaxed")

    def temperatures(self, thermal: dict) -> None:
        """Growth and final temperature below the lowest melting point of the stack's materials.

        An alloy counts with its lower member's melting point; materials without a
        tabulated one (:data:`mesastrain.physics.thermal.MELTING_POINT_K`) are skipped.
        """
        lowest, which = None, ""
        for where, t in [("substrate", self.substrate)] + [
                (f"layer[{i}]", t) for i, t in enumerate(self.layers)]:
            try:
                tm = melting_point(get_material(t["material"], t.get("composition")))
            except MesastrainError:
                continue
            if tm is not None and (lowest is None or tm < lowest):
                lowest, which = tm, f"{t['label']} ({where})"
        if lowest is None:
            return
        for name in ("growth_temperature", "final_temperature"):
            kelvin = thermal.get(name)
            if kelvin is not None and kelvin >= lowest:
                raise CaseError(f"thermal.{name}",
                                f"{kelvin:.6g} K ({kelvin - 273.15:.6g} C) is at or above the "
                                f"melting point of {which}, about {lowest:.0f} K "
                                f"({lowest - 273.15:.0f} C); give a lower temperature")

    def layer_orientations(self) -> None:
        """Give layers without their own orientation the substrate's (same crystal system)."""
        s = self.substrate
        for i, t in enumerate(self.layers):
            if t["normal"] is not None:
                continue
            if t["system"] == "isotropic":      # any frame will do; (001)[100] is always valid
                t["normal"], t["x_axis"] = (0, 0, 1), (1, 0, 0)
                continue
            if t["system"] != s["system"]:
                raise CaseError(f"layer[{i}].normal",
                                f"required key is missing; {t['label']} is {t['system']} but "
                                f"the substrate {s['label']} is {s['system']}, so this layer "
                                f"needs its own normal and x_axis")
            t["normal"], t["x_axis"] = s["normal"], s["x_axis"]

    def stack(self) -> float:
        """Total thickness of the layers, nm."""
        return math.fsum(t["thickness"] for t in self.layers)

    def _group_numbers(self, groups) -> tuple:
        """Imported-mesh groups mapped to a layer's name -> the layer's region number."""
        names = {t["name"].lower(): i for i, t in enumerate(self.layers, start=1)}
        out = []
        for group, region in groups:
            if isinstance(region, str):
                if region.strip().lower() not in names:
                    raise CaseError(f"pattern.groups.{group}",
                                    f"{region!r} is not a region of the case; allowed: "
                                    f"substrate, " + ", ".join(t["name"] for t in self.layers))
                region = names[region.strip().lower()]
            out.append((group, region))
        return tuple(out)

    def pattern_fits(self) -> None:
        """Etch depth, corner radius, sloped sidewalls and pitch against the feature and stack.

        Fills in a square pitch when one length is given for a 2-D array.
        """
        p = self.pattern
        if p["shape"] in ("none", "mesh"):
            if p["shape"] == "mesh":
                n = len(self.layers)
                p["groups"] = self._group_numbers(p["groups"])
                for name, region in p["groups"]:
                    if region > n:
                        raise CaseError(f"pattern.groups.{name}",
                                        f"region {region} does not exist; the case has the "
                                        f"substrate (0) and {n} layer(s) (1..{n})")
            return
        limit = self.stack() + self.substrate["thickness"]
        if p["etch_depth"] > limit:
            raise CaseError("pattern.etch_depth",
                            f"{p['etch_depth']:.10g} nm is deeper than the layers plus the "
                            f"substrate ({limit:.10g} nm); give at most {limit:.10g} nm")
        if p["shape"] == "rectangle" and p.get("corner_radius"):
            most = min(p["width"], p["length"]) / 2.0
            if p["corner_radius"] > most:
                raise CaseError("pattern.corner_radius",
                                f"{p['corner_radius']:.10g} nm is more than half the shorter "
                                f"side; give at most {most:.10g} nm")
        view = PatternView(p)
        top = outline_of(view)
        taper = taper_of(view)
        foot = top.offset(taper)
        problem = foot.problem()
        if problem:
            raise CaseError("pattern.sidewall_angle",
                            f"{p['sidewall_angle']:.10g} degrees over the etch depth of "
                            f"{p['etch_depth']:.10g} nm moves the sidewall by {abs(taper):.10g} "
                            f"nm, which leaves no valid outline at the "
                            f"{'foot' if taper < 0 else 'etch floor'} ({problem}); use a "
                            f"steeper sidewall")
        if p.get("pitch") is None:
            return
        if p["shape"] == "stripe":
            if p["pitch"][1] is not None:
                raise CaseError("pattern.pitch", "a stripe grating repeats along x only; give "
                                                 "the pitch as one length")
        elif p["pitch"][1] is None:
            p["pitch"] = (p["pitch"][0], p["pitch"][0])
        if p.get("margin") is not None:
            raise CaseError("pattern.margin", "the pitch sets the modelled cell of an array; "
                                              "remove margin or pitch")
        hx = max(top.half_extent()[0], foot.half_extent()[0])
        hy = max(top.half_extent()[1], foot.half_extent()[1])
        px, py = p["pitch"]
        sharp = p["shape"] in ("rectangle", "stripe") and not taper and not p.get("corner_radius")
        for name, h, period in (("x", hx, px), ("y", hy, py)):
            if period is None:
                continue
            too_big = 2 * h > period * (1 + INSIDE_RTOL) if sharp else 2 * h >= period
            if too_big:
                need = "at least" if sharp else "more than"
                raise CaseError("pattern.pitch",
                                f"{period:.10g} nm along {name} is shorter than the feature "
                                f"({2 * h:.10g} nm across, sidewall slope included); give "
                                f"{need} {2 * h:.10g} nm")

    def mesh_fits(self) -> None:
        """The modelled substrate depth: within the wafer and below the etch floor."""
        depth = self.mesh.get("substrate_depth")
        if depth is None:
            return
        thickness = self.substrate["thickness"]
        if depth > thickness:
            raise CaseError("mesh.substrate_depth",
                            f"{depth:.10g} nm is more than the substrate thickness "
                            f"({thickness:.10g} nm); give at most {thickness:.10g} nm")
        p = self.pattern
        if p["shape"] != "none" and p["etch_depth"] >= self.stack() + depth:
            raise CaseError("mesh.substrate_depth",
                            f"{depth:.10g} nm does not reach below the etch floor at z = "
                            f"{self.stack() - p['etch_depth']:.10g} nm; model a deeper substrate "
                            f"or etch less deep")

    def inside(self, point: tuple, key: str) -> None:
        """Raise unless ``point`` lies in the modelled body (surface included).

        Each bound is compared with a relative tolerance of INSIDE_RTOL of
        that bound (of the layer stack for the etch floor).
        """
        x, y, z = point
        if self.liners and self.pattern["shape"] not in ("none", "mesh") \
                and self._in_liner(x, y, z):
            return
        rel = 1.0 + INSIDE_RTOL
        top = self.stack()
        depth = self.mesh.get("substrate_depth") or self.substrate["thickness"]
        p = self.pattern
        where = f"({x:.10g}, {y:.10g}, {z:.10g}) nm"
        span = f"allowed: {-depth:.10g} <= z <= {top:.10g}"
        if z > top * rel:
            raise CaseError(key, f"{where} is above the top surface at z = {top:.10g} nm; {span}")
        if z < -depth * rel:
            raise CaseError(key, f"{where} is below the modelled substrate bottom at z = "
                                 f"{-depth:.10g} nm; {span}")
        if p["shape"] in ("none", "mesh"):    # an imported mesh is checked when it is read
            return
        view = PatternView(p)
        floor = top - p["etch_depth"]
        if z > floor + INSIDE_RTOL * max(top, p["etch_depth"]):
            ol = outline_at(view, top, z)
            hx, hy = ol.half_extent()
            tol = INSIDE_RTOL * max(hx, hy if math.isfinite(hy) else hx)
            if not bool(ol.contains(x, y, tol)):
                if p["shape"] == "rectangle" and ol.radius == 0:
                    raise CaseError(key, f"{where} is outside the {p['shape']} (|x| <= "
                                         f"{hx:.10g}, |y| <= {hy:.10g} nm above the etch "
                                         f"floor at z = {floor:.10g} nm)")
                if p["shape"] == "stripe":
                    raise CaseError(key, f"{where} is outside the stripe (|x| <= {hx:.10g} nm "
                                         f"at this height, above the etch floor at z = "
                                         f"{floor:.10g} nm)")
                raise CaseError(key, f"{where} is outside the {p['shape']} (at this height its "
                                     f"outline is a {ol.describe()}; the etch floor is at z = "
                                     f"{floor:.10g} nm)")
        elif p.get("pitch") is not None:
            px, py = p["pitch"]
            if abs(x) > px / 2 * rel or (py is not None and abs(y) > py / 2 * rel):
                ylim = f", |y| <= {py / 2:.10g}" if py is not None else ""
                raise CaseError(key, f"{where} is outside the periodic cell (|x| <= "
                                     f"{px / 2:.10g}{ylim} nm)")
        elif p.get("margin") is not None:
            foot = outline_at(view, top, floor)
            half_w, half_l = foot.half_extent()
            mx, my = half_w + p["margin"], half_l + p["margin"]
            if abs(x) > mx * rel or abs(y) > my * rel:
                raise CaseError(key, f"{where} is outside the modelled region (|x| <= "
                                     f"{mx:.10g}, |y| <= {my:.10g} nm: feature plus margin)")

    def _in_liner(self, x: float, y: float, z: float) -> bool:
        """True when (x, y, z) lies in the liners (square offsets of the feature, as meshed)."""
        p = self.pattern
        t_top, s_h, f_tot = self.liner_offsets()
        top = self.stack()
        floor = top - p["etch_depth"]
        span = max(top, p["etch_depth"]) * INSIDE_RTOL
        if z > top + t_top + span or z < floor - span:
            return False
        if z <= floor + f_tot + span:
            return self._in_cell(x, y)
        view = PatternView(p)
        taper = taper_of(view)
        rise = (top - z) / p["etch_depth"]          # 1 at the floor, negative above the top
        ol = outline_of(view).offset(taper * rise + s_h)
        hx, hy = ol.half_extent()
        tol = INSIDE_RTOL * max(hx, hy if math.isfinite(hy) else hx)
        return bool(ol.contains(x, y, tol))

    def _in_cell(self, x: float, y: float) -> bool:
        p = self.pattern
        rel = 1.0 + INSIDE_RTOL
        if p.get("pitch") is not None:
            px, py = p["pitch"]
            return abs(x) <= px / 2 * rel and (py is None or abs(y) <= py / 2 * rel)
        if p.get("margin") is not None:
            foot = outline_at(PatternView(p), self.stack(), self.stack() - p["etch_depth"])
            hx, hy = foot.half_extent()
            return abs(x) <= (hx + p["margin"]) * rel and abs(y) <= (hy + p["margin"]) * rel
        return True

    def probes_inside(self, probes: list) -> None:
        """Every probe point inside the modelled body."""
        for i, t in enumerate(probes):
            self.inside(t["at"], f"probe[{i}].at")

    def cuts_inside(self, cuts: list) -> None:
        """Both ends of every line cut inside the body, and the line not through the etched gap."""
        p = self.pattern
        for i, t in enumerate(cuts):
            self.inside(t["from"], f"cut[{i}].from")
            self.inside(t["to"], f"cut[{i}].to")
            if p["shape"] in ("none", "mesh"):
                continue
            # Both ends inside, but a cut from the feature down to the etched
            # floor beside it would pass through the etched-away gap: check
            # where the segment crosses the plane of the etch floor.
            floor = self.stack() - p["etch_depth"]
            level = floor + INSIDE_RTOL * max(self.stack(), p["etch_depth"])
            (x0, y0, z0), (x1, y1, z1) = t["from"], t["to"]
            if (z0 > level) != (z1 > level):     # one end beside the feature, one in it
                s = (floor - z0) / (z1 - z0)
                xc, yc = x0 + s * (x1 - x0), y0 + s * (y1 - y0)
                foot = outline_at(PatternView(p), self.stack(), floor)
                hx, hy = foot.half_extent()
                tol = INSIDE_RTOL * max(hx, hy if math.isfinite(hy) else hx)
                if not bool(foot.contains(xc, yc, tol)):
                    raise CaseError(f"cut[{i}]", f"the line leaves the body: it crosses the "
                                                 f"etch floor z = {floor:.10g} nm at ({xc:.10g}, "
                                                 f"{yc:.10g}) nm, outside the {p['shape']}")
