"""HTML assembly of a report: one self-contained page.

Everything the page shows comes from :class:`bridge.report.contents.Report`. The page
loads nothing: images are ``data:`` URIs, the style sheet is inline, there is no script,
and a Content-Security-Policy forbids anything else (so even a string that slipped past
the escaping could neither run nor fetch). Every string that does not come from this
module — model name, description, region, material and mass names, labels, paths, check
messages, solver warnings — goes through :func:`esc` (``html.escape``); only
:class:`Safe` strings built here are inserted as markup.
"""

from __future__ import annotations

import base64
import html as _html
import math
from collections.abc import Iterable

import numpy as np

from ..checks import MASS_RULE, rigid_body_count
from ..elements import FamilyView
from .contents import ComparisonEntry, ConvergenceEntry, Report, ResultEntry, VariantEntry

__all__ = ["Safe", "esc", "data_uri", "render_page", "CAUTION", "CSP"]

#: the engineering caution every report carries
CAUTION = "Results are to be checked by a qualified engineer under the applicable codes and standards."
CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'"
#: VTK cell type -> readable name, from the element-family registry (bridge/elements.py)
_VTK_NAMES = FamilyView(lambda f: f.label, key=lambda f: f.vtk_type)


class Safe(str):
    """Markup built by this module: inserted as it is."""


def esc(x) -> Safe:
    """``x`` as HTML text: escaped unless it is already :class:`Safe`."""
    if isinstance(x, Safe):
        return x
    return Safe(_html.escape("" if x is None else str(x), quote=True))


def cat(parts: Iterable) -> Safe:
    return Safe("".join(esc(p) for p in parts))


def tag(name: str, *content, **attrs) -> Safe:
    """``<name attrs>content</name>``; attribute values and content are escaped unless Safe.
    ``class_`` gives ``class``; ``data_x`` gives ``data-x``; a None attribute is left out."""
    parts = []
    for k, v in attrs.items():
        if v is None or v is False:
            continue
        key = k.rstrip("_").replace("_", "-")
        parts.append(f' {key}' if v is True else f' {key}="{esc(v)}"')
    return Safe(f"<{name}{''.join(parts)}>{cat(content)}</{name}>")


def data_uri(data: bytes, mime: str) -> str:
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"


def _img(data: bytes, mime: str, alt: str, **attrs) -> Safe:
    extra = "".join(f' {k.rstrip("_").replace("_", "-")}="{esc(v)}"' for k, v in attrs.items() if v is not None)
    return Safe(f'<img src="{data_uri(data, mime)}" alt="{esc(alt)}"{extra}>')


# --- numbers with units ------------------------------------------------------

def _finite(x) -> bool:
    try:
        return x is not None and math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def num(x, spec: str = ".4g", none: str = "–") -> str:
    return format(float(x), spec) if _finite(x) else none


def qty(x, unit: str, none: str = "–") -> str:
    """An SI value shown with its unit (lengths in mm, moduli in GPa/MPa)."""
    if not _finite(x):
        return none
    v = float(x)
    if unit == "m":
        return f"{v * 1e3:.4g} mm"
    if unit == "Pa":
        return f"{v / 1e9:.4g} GPa" if abs(v) >= 1e9 else f"{v / 1e6:.4g} MPa"
    return f"{v:.4g} {unit}"


def pct(x, digits: int = 1, none: str = "–") -> str:
    return f"{100 * float(x):.{digits}f} %" if _finite(x) else none


def _point(p, unit: str = "m") -> str:
    if not isinstance(p, (list, tuple)):
        return esc(p)
    if unit == "m":
        return "(" + ", ".join(f"{float(v) * 1e3:.4g}" for v in p) + ") mm" if all(_finite(v) for v in p) else str(p)
    return str(p)


# --- building blocks ------------------------------------------------------------

_STATUS = {"ok": ("ok", "ok"), "warn": ("warn", "warning"), "fail": ("fail", "FAIL"), "note": ("note", "note"),
           True: ("ok", "pass"), False: ("fail", "FAIL"), None: ("note", "–")}


def pill(status) -> Safe:
    cls, text = _STATUS.get(status, ("note", str(status)))
    return tag("span", text, class_=f"pill {cls}")


def table(headers: list, rows: list[list], numeric: Iterable[int] = (), cls: str = "", caption=None) -> Safe:
    numeric = set(numeric)
    head = tag("tr", *[tag("th", h, class_="num" if i in numeric else None) for i, h in enumerate(headers)])
    body = []
    for row in rows:
        cells = []
        for i, c in enumerate(row):
            if isinstance(c, tuple):  # (content, extra class)
                c, extra = c
            else:
                extra = None
            klass = " ".join(x for x in ("num" if i in numeric else "", extra or "") if x) or None
            cells.append(tag("td", c, class_=klass))
        body.append(tag("tr", *cells))
    return tag("table", tag("caption", caption) if caption else "", tag("thead", head), tag("tbody", *body),
               class_=cls or None)


def kv(pairs: list[tuple]) -> Safe:
    """A definition list of (term, value) pairs; values None are left out."""
    items = []
    for k, v in pairs:
        if v is None or v == "":
            continue
        items.append(tag("div", tag("dt", k), tag("dd", v)))
    return tag("dl", *items, class_="kv")


def section(anchor: str, title, *content, level: int = 2, cls: str = "card") -> Safe:
    return tag("section", tag(f"h{level}", title), *content, id=anchor, class_=cls)


def details(summary, *content, open_: bool = False) -> Safe:
    return tag("details", tag("summary", summary), *content, open=open_)


# --- the model ------------------------------------------------------------------

def _geometry(g: dict) -> Safe:
    kind = g.get("kind", "?")
    if kind in ("plate", "block"):
        dims = [("length (x)", qty(g.get("length"), "m")), ("width (y)", qty(g.get("width"), "m"))]
        if kind == "block":
            dims.append(("height (z)", qty(g.get("height"), "m")))
        return kv([("kind", kind), *dims, ("origin", _point(g.get("origin")) if g.get("origin") is not None else None)])
    if kind == "polygon":
        verts = g.get("vertices") or []
        return kv([("kind", kind), ("vertices", "; ".join(_point(v) for v in verts))])
    if kind == "cad":
        return kv([("kind", kind), ("file", g.get("file")), ("drawn in", g.get("unit"))])
    return _generic(g)


def _generic(d) -> Safe:
    if isinstance(d, dict):
        return kv([(k, _generic_text(v)) for k, v in d.items()])
    return esc(_generic_text(d))


def _generic_text(v) -> str:
    if isinstance(v, dict):
        return "; ".join(f"{k}: {_generic_text(x)}" for k, x in v.items())
    if isinstance(v, (list, tuple)):
        return ", ".join(_generic_text(x) for x in v)
    return "" if v is None else str(v)


def _region(r: dict) -> str:
    sel = r.get("select")
    if sel == "sides":
        return "sides " + ", ".join(map(str, r.get("sides") or []))
    if sel == "box":
        ent = f", {r['entity']}s" if r.get("entity") else ""
        return f"box from {_point(r.get('min'))} to {_point(r.get('max'))}{ent}"
    if sel == "plane":
        ent = f", {r['entity']}s" if r.get("entity") else ""
        return f"plane {r.get('axis')} = {qty(r.get('at'), 'm')}{ent}"
    return _generic_text(r)


def model_section(model: dict | None, anchor: str) -> Safe:
    if not model:
        return section(anchor, "Model", tag("p", "The result records no model.", class_="muted"), level=3)
    parts: list = [tag("p", tag("span", "name ", class_="muted"), tag("strong", model.get("name", "")),
                       class_="model-name")]
    desc = str(model.get("description", "")).strip()
    if desc:
        parts.append(tag("p", desc, class_="prose description"))
    blocks = []
    g = model.get("geometry")
    if isinstance(g, dict):
        blocks.append(tag("div", tag("h4", "Geometry"), _geometry(g), class_="block"))
    sec = model.get("section")
    if isinstance(sec, dict):
        blocks.append(tag("div", tag("h4", "Section"), kv([
            ("kind", sec.get("kind")), ("material", sec.get("material")),
            ("thickness", qty(sec.get("thickness"), "m") if "thickness" in sec else None)]), class_="block"))
    secs = model.get("sections")
    if isinstance(secs, dict) and secs:
        blocks.append(tag("div", tag("h4", "Sections"), table(
            ["section", "region", "kind", "material", "thickness"],
            [[n, x.get("region") or "the rest", x.get("kind"), x.get("material"),
              qty(x.get("thickness"), "m") if x.get("thickness") is not None else "–"]
             for n, x in secs.items() if isinstance(x, dict)]), class_="block"))
    an = model.get("analysis")
    if isinstance(an, dict):
        rng = None
        if _finite(an.get("min_frequency")) or _finite(an.get("max_frequency")):
            rng = f"{qty(an.get('min_frequency'), 'Hz', '0 Hz')} to {qty(an.get('max_frequency'), 'Hz', 'any')}"
        blocks.append(tag("div", tag("h4", "Analysis"), kv([
            ("modes requested", an.get("modes")), ("frequency range", rng),
            ("90 % rule checked in", ", ".join(map(str, an.get("mass_directions") or [])))]), class_="block"))
    ms = model.get("mesh")
    if isinstance(ms, dict):
        blocks.append(tag("div", tag("h4", "Mesh request"), kv([
            ("family", ms.get("family")),
            ("divisions", " × ".join(map(str, ms["divisions"])) if ms.get("divisions") else None),
            ("size", qty(ms.get("size"), "m") if ms.get("size") is not None else None),
            ("study levels / ratio", f"{ms.get('levels')} / {ms.get('ratio')}" if ms.get("levels") else None)]),
            class_="block"))
    parts.append(tag("div", *blocks, class_="blocks"))

    mats = model.get("materials") or {}
    if isinstance(mats, dict) and mats:
        users: dict[str, list[str]] = {}
        if isinstance(sec, dict):
            users.setdefault(str(sec.get("material")), []).append("section")
        if isinstance(secs, dict):
            for n, x in secs.items():
                if isinstance(x, dict):
                    users.setdefault(str(x.get("material")), []).append(f"section {n}")
        rows = [[name, qty(m.get("youngs_modulus"), "Pa"), num(m.get("poisson_ratio"), ".3g"),
                 qty(m.get("density"), "kg/m³"), ", ".join(users.get(name, []))]
                for name, m in mats.items() if isinstance(m, dict)]
        parts.append(tag("h4", "Materials"))
        parts.append(table(["material", "Young's modulus E", "Poisson's ratio ν", "density ρ", "used by"], rows,
                           numeric=(1, 2, 3)))
    regs = model.get("regions") or {}
    if isinstance(regs, dict) and regs:
        parts.append(tag("h4", "Regions"))
        parts.append(table(["region", "selects"], [[n, _region(r) if isinstance(r, dict) else _generic_text(r)]
                                                  for n, r in regs.items()]))
    sups = model.get("supports") or []
    parts.append(tag("h4", "Supports"))
    if sups:
        rows = []
        for s in sups:
            if not isinstance(s, dict):
                rows.append([_generic_text(s), "", ""])
                continue
            extra = []
            if s.get("dofs"):
                extra.append("fixes " + ", ".join(map(str, s["dofs"])))
            if s.get("normal"):
                extra.append(f"mirror plane normal {s['normal']}")
            rows.append([s.get("region", ""), s.get("kind", ""), "; ".join(extra)])
        parts.append(table(["region", "kind", "detail"], rows))
    else:
        parts.append(tag("p", "None: a free body (six rigid-body modes expected).", class_="muted"))
    masses = model.get("masses") or []
    if masses:
        rows = []
        for m in masses:
            if not isinstance(m, dict):
                continue
            where = _point(m["at"]) if m.get("at") is not None else f"spread over region {m.get('region')}"
            inertia = ", ".join(qty(x, "kg·m²") for x in m["inertia"]) if m.get("inertia") else ""
            rows.append([m.get("name", ""), qty(m.get("mass"), "kg"), where, inertia])
        parts.append(tag("h4", "Added masses"))
        parts.append(table(["mass", "value", "at", "rotary inertia Ixx, Iyy, Izz"], rows, numeric=(1,)))
    bands = model.get("excitation") or []
    if bands:
        rows = []
        for b in bands:
            if not isinstance(b, dict):
                continue
            lo, hi, mg = b.get("low"), b.get("high"), b.get("margin", 0.0)
            wide = (f"{float(lo) * (1 - float(mg)):.4g}–{float(hi) * (1 + float(mg)):.4g} Hz"
                    if _finite(lo) and _finite(hi) and _finite(mg) else "–")
            rows.append([b.get("name", ""), f"{num(lo)}–{num(hi)} Hz", pct(mg, 0), wide])
        parts.append(tag("h4", "Excitation bands"))
        parts.append(table(["band", "range", "margin", "kept clear"], rows, numeric=(1, 2, 3)))
    return section(anchor, "Model", *parts, level=3)


# --- mesh, frequencies, checks, provenance ---------------------------------------------

def mesh_section(entry: ResultEntry, anchor: str) -> Safe:
    r = entry.result
    m = r.metadata.get("mesh") or {}
    ext = np.ptp(r.points, axis=0) if r.points.size else np.zeros(3)
    tot = r.total_effective_mass
    pairs = [
        ("element family", m.get("family")),
        ("cell type", _VTK_NAMES.get(r.cell_type, f"VTK type {r.cell_type}")),
        ("element type (solver)", (r.metadata.get("provenance") or {}).get("element_type")),
        ("nodes", f"{int(m.get('nodes', r.points.shape[0])):,}"),
        ("elements", f"{int(m.get('elements', r.cells.shape[0])):,}"),
        ("element size h", qty(m.get("element_size_m"), "m") if m.get("element_size_m") is not None else None),
        ("structured", {True: "yes", False: "no"}.get(m.get("structured"))),
        ("refinement level", m.get("level")),
        ("element quality (gmsh minSICN) min / mean",
         f"{num(m.get('quality_min'), '.3f')} / {num(m.get('quality_mean'), '.3f')}" if "quality_min" in m else None),
        ("constrained nodes", m.get("constrained_nodes")),
        ("free DOF", f"{int(m['free_dof']):,}" if _finite(m.get("free_dof")) else None),
        ("DOF per node", m.get("dofs_per_node")),
        ("extent x × y × z", " × ".join(f"{v * 1e3:.4g}" for v in ext) + " mm"),
        ("model mass", qty(r.total_mass, "kg")),
        ("mass on free DOF x, y, z", ", ".join(qty(v, "kg") for v in tot[:3]) if tot is not None else None),
    ]
    parts = [kv(pairs)]
    if entry.model_picture:
        marks = r.metadata.get("marks") or {}
        nsup = int(marks.get("supported_count", len(marks.get("supported_nodes") or [])))
        shown = len(marks.get("supported_nodes") or [])
        parts.append(tag("figure", _img(entry.model_picture, "image/png", "the model as meshed, supports and masses "
                                        "marked", class_="chart", data_kind="model-picture"),
                         tag("figcaption", f"The model as meshed: {nsup:,} supported node(s) as dark red dots"
                                           + (f" ({shown:,} of them drawn)" if shown < nsup else "")
                                           + f", {len(marks.get('point_masses') or [])} point mass(es) as "
                                             "orange balls (size grows with the mass)" + _connection_caption(marks)
                                           + "."),
                         class_="wide"))
    return section(anchor, "Mesh", *parts, level=3)


def _connection_caption(marks: dict) -> str:
    """The beams, springs and couplings the model picture draws, for its caption."""
    parts = []
    if marks.get("beam_count"):
        parts.append(f"{int(marks['beam_count']):,} beam element(s) as thick blue lines")
    springs = marks.get("springs") or []
    if springs:
        ground = sum(1 for _, b in springs if b < 0)
        parts.append(f"{len(springs)} spring(s) as green lines ({ground} to the ground, drawn downwards to a "
                     "green square)")
    for kind, colour in (("rigid", "purple"), ("distributing", "pink")):
        n = sum(1 for c in marks.get("couplings") or [] if c[0] == kind)
        if n:
            parts.append(f"{n} {kind} coupling(s) as {colour} spokes from the reference point")
    return "".join(f", {p}" for p in parts)


def _bands(model: dict | None) -> list[dict]:
    out = []
    for b in (model or {}).get("excitation") or []:
        if isinstance(b, dict) and _finite(b.get("low")) and _finite(b.get("high")):
            out.append(b)
    return out


def frequency_section(entry: ResultEntry, anchor: str, freq_map: bytes | None = None) -> Safe:
    r = entry.result
    if r.n_modes == 0:
        return section(anchor, "Natural frequencies and effective mass",
                       tag("p", "The result holds no mode.", class_="muted"), level=3)
    rigid = stored_rigid_count(r)
    frac = r.effective_mass_fraction()
    # verdicts as the run's checks stored them: the report renders, it does not re-judge
    rule = stored_check(r, "mass_rule_90") or {}
    per_dir = (rule.get("figures") or {}).get("directions") or {}
    dirs = list(per_dir)
    inside: dict[int, list[str]] = {}
    for c in stored_checks(r):
        if str(c.get("name", "")).startswith("excitation:"):
            for m in (c.get("figures") or {}).get("modes_inside") or []:
                inside.setdefault(int(m) - 1, []).append(str(c["name"]).split(":", 1)[1])
    headers = ["mode", "f [Hz]", "ω² [(rad/s)²]"]
    numeric = [0, 1, 2]
    if frac is not None:
        cum = np.cumsum(frac, axis=0)
        first = {j: (per_dir[d]["mode"] - 1 if d in per_dir and per_dir[d].get("mode") else None)
                 for j, d in enumerate("xyz")}
        headers += [f"m_eff {d}" for d in "xyz"] + [f"Σ {d}" for d in "xyz"]
        numeric += list(range(3, 9))
    headers.append("note")
    rows = []
    for i in range(r.n_modes):
        row = [str(i + 1), f"{r.frequencies[i]:.2f}", f"{r.eigenvalues[i]:.4g}"]
        if frac is not None:
            row += [pct(frac[i, j]) for j in range(3)]
            for j in range(3):
                if first[j] == i and "xyz"[j] in dirs:
                    row.append((pct(cum[i, j]) + " ✓", "reach"))
                elif "xyz"[j] in dirs and first[j] is not None and i > first[j]:
                    row.append((pct(cum[i, j]), "past"))
                else:
                    row.append(pct(cum[i, j]))
        notes = []
        if i < rigid:
            notes.append("rigid-body mode")
        notes += [f"inside band {b}" for b in inside.get(i, [])]
        row.append(("; ".join(notes), "bad" if i in inside else None))
        rows.append(row)
    parts = [table(headers, rows, numeric=numeric, cls="freq")]
    if frac is not None:
        items = []
        for j, d in enumerate("xyz"):
            if d not in dirs:
                items.append(tag("li", f"{d}: {pct(cum[-1, j])} after {r.n_modes} modes (not checked: "
                                       "not among analysis.mass_directions)", class_="muted"))
            elif first[j] is not None:
                items.append(tag("li", pill("ok"), f" {d}: {MASS_RULE:.0%} of the mass reached at mode {first[j] + 1} "
                                                   f"({pct(cum[first[j], j])})"))
            else:
                items.append(tag("li", pill("warn"), f" {d}: {pct(per_dir[d].get('reached', cum[-1, j]))} after "
                                                     f"{r.n_modes} modes — {MASS_RULE:.0%} not reached, more modes "
                                                     "are needed"))
        if not rule:
            items.append(tag("li", "the result records no mass_rule_90 check", class_="muted"))
        parts.append(tag("h4", f"Cumulative effective mass, {MASS_RULE:.0%} rule"))
        parts.append(tag("ul", *items, class_="rule"))
        parts.append(tag("p", "Effective-mass fractions are of the model's mass ", qty(r.total_mass, "kg"),
                         "; rule: EN 1998-1 §4.3.3.3.1, ASCE 7-16 §12.9.1.1 (the directions the model names "
                         "in analysis.mass_directions). Masses on supported nodes never participate, so a "
                         "supported part may stay below 100 %.", class_="small muted"))
    else:
        parts.append(tag("p", "No effective masses recorded.", class_="muted"))
    if freq_map is not None:
        parts.append(tag("figure", _img(freq_map, "image/png", "modes against the excitation bands",
                                        class_="chart", data_kind="frequency-map"),
                         tag("figcaption", "Elastic modes against the excitation bands and their margins."),
                         class_="wide"))
    return section(anchor, "Natural frequencies and effective mass", *parts, level=3)


def checks_section(entry: ResultEntry, anchor: str) -> Safe:
    checks = entry.result.metadata.get("checks") or []
    rows = [[pill(c.get("status")), c.get("name", ""), c.get("message", "")] for c in checks if isinstance(c, dict)]
    body = table(["", "check", "finding"], rows, cls="checks") if rows else tag("p", "No checks recorded.",
                                                                                   class_="muted")
    return section(anchor, "Checks", body, level=3)


def stored_checks(r) -> list[dict]:
    return [c for c in r.metadata.get("checks") or [] if isinstance(c, dict)]


def stored_check(r, name: str) -> dict | None:
    return next((c for c in stored_checks(r) if c.get("name") == name), None)


def stored_inside_modes(r) -> set[int] | None:
    """1-based modes the run's excitation checks found inside a band (None: no check recorded)."""
    found = [c for c in stored_checks(r) if str(c.get("name", "")).startswith("excitation:")]
    if not found:
        return None
    return {int(m) for c in found for m in (c.get("figures") or {}).get("modes_inside") or []}


def stored_rigid_count(r) -> int:
    """The rigid-body count the run's check found (older results: the shared rule)."""
    c = stored_check(r, "rigid_body_modes")
    found = (c or {}).get("figures", {}).get("found") if c else None
    return int(found) if isinstance(found, int) else rigid_body_count(r.frequencies, r.eigenvalues)


def gallery_section(entry: ResultEntry, anchor: str) -> Safe:
    r = entry.result
    rigid = stored_rigid_count(r)
    frac = r.effective_mass_fraction()
    cards = []
    for mode in sorted(set(entry.pictures) | set(entry.animations)):
        i = mode - 1
        meta = [f"{r.frequencies[i]:.2f} Hz"]
        if i < rigid:
            meta.append("rigid-body mode")
        if frac is not None:
            j = int(np.argmax(frac[i]))
            meta.append(f"largest m_eff: {'xyz'[j]} {pct(frac[i, j])}")
        figs = []
        if mode in entry.pictures:
            figs.append(_img(entry.pictures[mode], "image/png", f"mode {mode} deformed shape",
                             class_="mode-picture", data_mode=str(mode), data_result=entry.anchor))
        if mode in entry.animations:
            figs.append(_img(entry.animations[mode], "image/gif", f"mode {mode} animation",
                             class_="mode-animation", data_mode=str(mode), data_result=entry.anchor))
        cards.append(tag("figure", tag("div", *figs, class_="pair"),
                         tag("figcaption", tag("strong", f"Mode {mode}"), " · ", " · ".join(meta)),
                         class_="mode", id=f"{entry.anchor}-mode-{mode}"))
    parts = []
    if cards:
        parts.append(tag("p", "Deformed shape (largest displacement drawn at 10 % of the part's largest "
                              "dimension; the shape's sign and scale are arbitrary) coloured by displacement "
                              "over the largest, over the undeformed outline (dark line); beside it the mode "
                              "in motion.", class_="small muted"))
        parts.append(tag("div", *cards, class_="gallery"))
    if entry.left_out_animations or entry.left_out_pictures:
        what = []
        if entry.left_out_pictures:
            what.append(f"the pictures of modes {_modes_text(entry.left_out_pictures)}")
        if entry.left_out_animations:
            what.append(f"the animations of modes {_modes_text(entry.left_out_animations)}")
        parts.append(tag("p", "Left out to hold the report below its size cap: ", " and ".join(what),
                         " (animations go first, then pictures, from the last result's highest mode; "
                         "--max-size 0 keeps everything).", class_="muted"))
    if entry.pictured_modes < r.n_modes:
        parts.append(tag("p", f"Modes {entry.pictured_modes + 1}–{r.n_modes} are not drawn "
                              "(raise --max-modes to draw them).", class_="muted"))
    if not cards and entry.pictured_modes:
        parts.append(tag("p", "No pictures: see the findings.", class_="muted"))
    return section(anchor, "Mode shapes", *parts, level=3)


def _modes_text(modes: list[int]) -> str:
    modes = sorted(modes)
    runs, start = [], None
    for i, m in enumerate(modes):
        if start is None:
            start = m
        if i + 1 == len(modes) or modes[i + 1] != m + 1:
            runs.append(str(start) if start == m else f"{start}–{m}")
            start = None
    return ", ".join(runs)


def provenance_section(entry: ResultEntry, anchor: str) -> Safe:
    p = entry.result.metadata.get("provenance") or {}
    cmd = p.get("command")
    warnings = p.get("solver_warnings") or []
    wl = None
    if warnings:
        counts: dict[str, int] = {}
        for w in warnings:
            counts[str(w)] = counts.get(str(w), 0) + 1
        wl = tag("ul", *[tag("li", w + (f" (×{n})" if n > 1 else "")) for w, n in counts.items()], class_="plain")
    pairs = [
        ("solver", f"{p.get('solver', '')} {p.get('solver_version', '')}".strip() or None),
        ("element type", p.get("element_type")),
        ("element chosen", _element_choice(p.get("element"))),
        ("solver options", ", ".join(f"{k} = {v}" for k, v in (p.get("solver_options") or {}).items()) or None),
        ("command", tag("code", " ".join(map(str, cmd)) if isinstance(cmd, list) else cmd) if cmd else None),
        ("solver wall time", qty(p.get("wall_time_s"), "s") if p.get("wall_time_s") is not None else None),
        ("run created", p.get("created")),
        ("modebridge", p.get("modebridge_version")),
        ("model file", tag("code", p.get("model_file")) if p.get("model_file") else None),
        ("model hash (SHA-256)", tag("code", p.get("model_hash")) if p.get("model_hash") else None),
        ("physics hash", tag("code", p.get("physics_hash")) if p.get("physics_hash") else None),
        ("result file", tag("code", str(entry.path)) if entry.path else None),
        ("result file SHA-256", tag("code", entry.sha256) if entry.sha256 else None),
        ("mode normalisation", entry.result.normalisation),
        ("effective masses from", entry.result.metadata.get("mass_properties_source")),
        ("solver warnings", wl),
    ]
    return section(anchor, "Provenance", kv(pairs), level=3)


def _element_choice(el) -> str | None:
    """Which element the solver got and why (the run's ``provenance.element``, bridge/selection.py)."""
    if not isinstance(el, dict) or not (el.get("element_type") or el.get("family")):
        return None
    return f"{el.get('element_type') or el.get('family')} — {el.get('reason', '')}"


def result_block(entry: ResultEntry, freq_map: bytes | None = None, open_: bool = True) -> Safe:
    a = entry.anchor
    r = entry.result
    prov = r.metadata.get("provenance") or {}
    model = r.metadata.get("model") or {}
    head = f"{entry.label} — {model.get('name') or prov.get('model_name') or 'result'}"
    sub = (f"{prov.get('solver', '?')} {prov.get('solver_version', '')} ({prov.get('element_type', '?')}), "
           f"{r.n_modes} modes, f1 = {r.frequencies[0]:.2f} Hz" if r.n_modes else "no modes")
    worst = _worst(r.metadata.get("checks") or [])
    body = [tag("p", pill(worst), " ", sub, class_="lead"),
            model_section(model, f"{a}-model"), mesh_section(entry, f"{a}-mesh"),
            frequency_section(entry, f"{a}-freq", freq_map), checks_section(entry, f"{a}-checks"),
            gallery_section(entry, f"{a}-modes"), provenance_section(entry, f"{a}-prov")]
    return tag("section", tag("h2", head), *body, id=a, class_="result")


def _worst(checks: list) -> str:
    st = [c.get("status") for c in checks if isinstance(c, dict)]
    return "fail" if "fail" in st else "warn" if "warn" in st else "ok" if st else "note"


# --- comparisons and studies --------------------------------------------------------

def comparison_block(c: ComparisonEntry, anchor: str) -> Safe:
    rc = c.comparison
    th = rc.thresholds
    rows = []
    for v in rc.pair_verdicts():
        rows.append([str(v["a"]), f"{v['fa']:.2f}", str(v["b"]), f"{v['fb']:.2f}",
                     f"{100 * v['df']:+.3f} %", f"{v['mac']:.3f}",
                     "" if v["cluster"] is None else f"C{v['cluster']}", pill(bool(v["ok"]))])
    parts = [tag("p", pill(bool(rc.passed)), " ",
                 f"A = {rc.label_a}, B = {rc.label_b}. Pass: MAC ≥ {th.min_mac:g} and "
                 f"|Δf| ≤ {100 * th.max_df:g} % per pair, repeated-mode clusters by principal angle ≤ {th.max_angle_deg:.1f}° "
                 "(common practice, no source).", class_="lead"),
             kv([("B mapped onto A's points", "yes (meshes differ: shape functions of B evaluated at A's nodes)"
                  if rc.mapped else "no (same points)"),
                 ("MAC on", "translations" if rc.translations_only else "translations and rotations"),
                 ("rigid-body modes A / B", f"{rc.rigid_a} / {rc.rigid_b} (left out of the pairing)"),
                 ("forced (different models)", "yes" if rc.forced else None)]),
             table(["A mode", "f A [Hz]", "B mode", "f B [Hz]", "Δf", "MAC", "cluster", ""], rows,
                   numeric=(0, 1, 2, 3, 4, 5))]
    for k, cl in enumerate(rc.comparison.clusters):
        parts.append(tag("p", f"Cluster C{k + 1}: A modes {[i + 1 for i in cl.a]} ↔ B modes "
                              f"{[j + 1 for j in cl.b]}, principal angles "
                              f"{', '.join(f'{x:.2f}°' for x in cl.angles_deg)}.", class_="small"))
    if rc.comparison.unpaired_a:
        missing = [i + 1 for i in rc.comparison.unpaired_a]
        parts.append(tag("p", pill("fail"), f" modes of A without a partner: {missing}"))
    if rc.comparison.unpaired_b:
        parts.append(tag("p", f"Modes of B without a partner: {[j + 1 for j in rc.comparison.unpaired_b]}",
                         class_="muted"))
    if c.heatmap is not None:
        parts.append(tag("figure", _img(c.heatmap, "image/png", "MAC heat map", class_="chart", data_kind="mac"),
                         tag("figcaption", f"MAC between the modes of A = {rc.label_a} (rows) and B = "
                                           f"{rc.label_b} (columns); paired cells outlined."), class_="wide"))
    return section(anchor, f"Comparison: {rc.label_a} vs {rc.label_b}", *parts)


def convergence_block(c: ConvergenceEntry, anchor: str) -> Safe:
    st = c.study
    levels = st.get("levels") or []
    h = st.get("h_m") or []
    head = ["mode"] + [f"L{lv} [Hz]" for lv in levels] + ["p", "f_ext [Hz]", "GCI fine", "asym. ratio", "trend",
                                                          "verdict"]
    rows = []
    for m in st.get("modes", []):
        g = m.get("gci") or {}
        cells = [str(m.get("mode"))]
        for f, idx in zip(m.get("f_hz") or [], m.get("index") or []):
            other = "" if idx in (None, m.get("mode")) else f" (#{idx})"  # the mode's number on that level
            cells.append("–" if f is None else f"{float(f):.2f}{other}")
        verdict = m.get("verdict") or (g.get("verdict") if g else "not tracked")
        cells += [num(g.get("p"), ".2f") if not g.get("order_assumed") else "(1) assumed",
                  num(g.get("extrapolated"), ".2f"), pct(g.get("gci_fine"), 3) if g else "not tracked",
                  num(g.get("asymptotic_ratio"), ".3f"), g.get("trend", "") if g else "",
                  (verdict, "good" if verdict == "converged" else "bad")]
        rows.append(cells)
    n = len(levels)
    parts = [tag("p", f"Solver {st.get('solver', '')}; element size h per level: "
                      + ", ".join(f"{float(x) * 1e3:.4g} mm" for x in h)
                      + f"; tolerance on the fine-grid GCI {pct(st.get('tolerance'), 2)}. Modes are followed "
                        "from the finest level down by shape (MAC); GCI after Celik et al., J. Fluids Eng. "
                        "130 (2008) 078001.", class_="lead"),
             tag("p", str(st.get("h_definition") or ""), class_="small muted"),
             table(head, rows, numeric=range(0, n + 5))]
    if "passed" in st:
        bad = st.get("unconverged_modes") or []
        parts.insert(0, tag("p", pill("ok" if st["passed"] else "fail"), " ",
                            "every mode converged" if st["passed"] else
                            f"mode(s) {', '.join(map(str, bad))} not converged or their behaviour cannot be told",
                            class_="lead"))
    if st.get("rigid_body_modes"):
        parts.append(tag("p", f"{st['rigid_body_modes']} rigid-body modes left out.", class_="muted"))
    for caption, png in c.plots:
        parts.append(tag("figure", _img(png, "image/png", caption, class_="chart", data_kind="convergence"),
                         tag("figcaption", caption), class_="wide"))
    runs = st.get("runs") or []
    if runs:
        parts.append(details("Runs of the study", table(["run", "state", "error"],
                                                        [[x.get("label", ""), x.get("state", ""), x.get("error") or ""]
                                                         for x in runs])))
    return section(anchor, f"Mesh convergence — {st.get('solver', '')}", *parts)


def variants_block(baseline: dict | None, variants: list[VariantEntry], anchor: str) -> Safe:
    parts = []
    if baseline:
        parts.append(tag("p", f"Baseline: {len(baseline.get('frequencies_hz') or [])} modes, "
                              + ", ".join(f"{float(f):.2f}" for f in (baseline.get("frequencies_hz") or [])[:12])
                              + " Hz.", class_="lead"))
    for v in variants:
        d = v.data
        sub = [tag("h3", f"Variant {d.get('name', '')}"),
               tag("p", pill(d.get("status") or ("ok" if d.get("state") in ("done", "cached") else "fail")), " ",
                   f"state {d.get('state', '?')}; rigid-body modes {d.get('rigid_body_modes', 0)}",
                   f"; {d['error']}" if d.get("error") else "", f"; {d['note']}" if d.get("note") else "")]
        bad = [c for c in d.get("checks") or [] if isinstance(c, dict) and c.get("status") in ("warn", "fail")]
        if bad:
            sub.append(tag("ul", *[tag("li", pill(c.get("status")), f" {c.get('name', '')}: {c.get('message', '')}")
                                   for c in bad], class_="rule"))
        pairs = d.get("pairs") or []
        if pairs:
            sub.append(table(["baseline mode", "f [Hz]", "variant mode", "f [Hz]", "shift", "MAC"],
                             [[p.get("baseline_mode"), num(p.get("f_baseline_hz"), ".2f"), p.get("variant_mode"),
                               num(p.get("f_variant_hz"), ".2f"), pct(p.get("shift"), 2), num(p.get("mac"), ".3f")]
                              for p in pairs], numeric=range(6)))
        if d.get("unpaired_variant_modes"):
            sub.append(tag("p", f"Variant modes without a baseline partner (no MAC above the pairing floor): "
                                f"{d['unpaired_variant_modes']}", class_="muted"))
        if d.get("unpaired_baseline_modes"):
            sub.append(tag("p", f"Baseline modes without a partner in this variant: {d['unpaired_baseline_modes']}",
                           class_="muted"))
        if v.heatmap is not None:
            sub.append(tag("figure", _img(v.heatmap, "image/png", "MAC heat map", class_="chart", data_kind="mac"),
                           tag("figcaption", "MAC, baseline (rows) against the variant (columns)."), class_="wide"))
        parts.append(tag("div", *sub, class_="variant"))
    return section(anchor, "Variants against the baseline", *parts)


def verification_block(report: Report, anchor: str) -> Safe:
    parts = [tag("p", f"From {report.verification_file}.", class_="small muted")]
    for c in report.verification or []:
        rows = [[m.mode, m.label, num(m.target, ".5g"), num(m.value, ".5g"),
                 pct(m.deviation, 2) if m.deviation is not None else "–",
                 pct(m.tolerance, 2) if m.tolerance is not None else "–", pill(m.passed)] for m in c.modes]
        meta = kv([("solver", c.solver or None), ("element", c.element or None), ("source", c.source or None),
                   ("note", c.note or None)])
        parts.append(tag("div", tag("h3", pill(c.passed), " ", c.name), meta,
                         table(["mode", "quantity", "target", "value", "deviation", "tolerance", ""], rows,
                               numeric=(0, 2, 3, 4, 5)) if rows else "", class_="variant"))
    return section(anchor, "Verification", *parts)


def findings_block(report: Report, anchor: str) -> Safe:
    order = {"fail": 0, "warn": 1, "note": 2}
    items = sorted(report.findings, key=lambda f: order.get(f.level, 3))
    if not any(f.level in ("fail", "warn") for f in items):
        lead = tag("p", pill("ok"), " No failed check and no warning.", class_="lead")
    else:
        nf = sum(f.level == "fail" for f in items)
        nw = sum(f.level == "warn" for f in items)
        lead = tag("p", pill("fail" if nf else "warn"), f" {nf} failed, {nw} warning(s).", class_="lead")
    rows = [[pill(f.level), f.where, f.text] for f in items]
    return section(anchor, "Findings", lead, table(["", "where", "finding"], rows, cls="checks") if rows else "")


# --- the page -------------------------------------------------------------------------

_KIND = {"run": "Run report", "result": "Result report", "comparison": "Comparison report",
         "convergence": "Convergence study report", "variants": "Variant study report",
         "verification": "Verification report"}

CSS = """
:root{--ink:#1f2933;--muted:#5c6b7a;--line:#d9e1e8;--paper:#ffffff;--ground:#eef2f5;--accent:#0b7285;
--ok:#2b8a3e;--warn:#b35c00;--fail:#c92a2a;--note:#5c6b7a}
*{box-sizing:border-box}
html{background:var(--ground)}
body{margin:0;color:var(--ink);font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,"Noto Sans",sans-serif}
main{max-width:1220px;margin:0 auto;padding:0 20px 40px}
.masthead{background:linear-gradient(100deg,#0b3c49 0%,#0b7285 70%,#1098ad 100%);color:#fff;padding:26px 0 22px}
.masthead .inner{max-width:1220px;margin:0 auto;padding:0 20px}
.masthead .kind{letter-spacing:.12em;text-transform:uppercase;font-size:12px;opacity:.85}
.masthead h1{margin:4px 0 6px;font-size:28px;font-weight:650}
.masthead .src{font-size:13px;opacity:.9;word-break:break-all}
.masthead .verdict{margin:2px 0 8px;font-size:16px;font-weight:600}
.caution{margin:18px 0;padding:12px 16px;border-left:5px solid var(--warn);background:#fff4e6;border-radius:6px}
nav.toc{margin:14px 0;font-size:14px}
nav.toc a{color:var(--accent);text-decoration:none;margin-right:14px;white-space:nowrap}
.card,.result>section{background:var(--paper);border:1px solid var(--line);border-radius:10px;
padding:14px 18px;margin:14px 0}
.result{margin:30px 0}
.result>h2{border-bottom:3px solid var(--accent);padding-bottom:4px}
h2{font-size:21px;margin:6px 0 10px}h3{font-size:17px;margin:4px 0 8px}
h4{font-size:14px;margin:14px 0 6px;color:var(--muted);text-transform:uppercase;letter-spacing:.05em}
.lead{margin:4px 0 10px}
.muted{color:var(--muted)}.small{font-size:13px}
.prose{white-space:pre-wrap;max-width:80ch;margin:4px 0 10px}.model-name{margin:2px 0;font-size:16px}
table{border-collapse:collapse;width:100%;margin:6px 0 10px;font-size:14px}
th,td{padding:4px 8px;border-bottom:1px solid var(--line);text-align:left;vertical-align:top}
th{background:#f5f8fa;font-weight:600}
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
tbody tr:nth-child(even){background:#fafcfd}
td.reach{background:#d3f9d8;font-weight:600}td.past{color:var(--ok)}
td.bad{color:var(--fail);font-weight:600}td.good{color:var(--ok);font-weight:600}
dl.kv{display:grid;grid-template-columns:repeat(auto-fill,minmax(300px,1fr));gap:4px 18px;margin:6px 0}
dl.kv div{display:flex;gap:8px;border-bottom:1px dotted var(--line);padding:2px 0}
dl.kv dt{color:var(--muted);flex:0 0 42%}dl.kv dd{margin:0;word-break:break-word}
.blocks{display:grid;grid-template-columns:repeat(auto-fit,minmax(250px,1fr));gap:10px}
.blocks dl.kv{grid-template-columns:1fr}
.pill{display:inline-block;min-width:44px;text-align:center;padding:0 8px;border-radius:999px;font-size:12px;
font-weight:700;color:#fff}
.pill.ok{background:var(--ok)}.pill.warn{background:var(--warn)}.pill.fail{background:var(--fail)}
.pill.note{background:var(--note)}
ul.rule,ul.plain{margin:4px 0;padding-left:18px}
.gallery{display:flex;flex-direction:column;gap:12px}
figure{margin:8px 0}
figure.mode{border:1px solid var(--line);border-radius:8px;padding:8px;background:#fbfcfd}
figure.mode .pair{display:flex;flex-wrap:wrap;gap:10px;align-items:center}
figure.mode img{max-width:100%;height:auto;border-radius:4px;background:#fbfcfd}
figcaption{font-size:13px;color:var(--muted);margin-top:4px}
figure.wide img{max-width:100%;height:auto}
code{font:12px ui-monospace,SFMono-Regular,Menlo,Consolas,monospace;word-break:break-all}
details summary{cursor:pointer;color:var(--accent)}
.variant{border-top:1px solid var(--line);padding-top:8px;margin-top:10px}
footer{max-width:1220px;margin:0 auto;padding:16px 20px 30px;color:var(--muted);font-size:13px}
@media print{html{background:#fff}
.masthead{background:#0b7285;-webkit-print-color-adjust:exact;print-color-adjust:exact}
.card,.result>section{break-inside:avoid}nav.toc{display:none}}
"""


def verdict(report: Report) -> tuple[str, str]:
    """One overall verdict for the top of the page: (status ok|warn|fail, the line's text).

    fail: a check, comparison, case or run failed; warn: a warning (and no failure); ok: neither.
    The line names the figures a reviewer asks for first."""
    nf = sum(f.level == "fail" for f in report.findings)
    nw = sum(f.level == "warn" for f in report.findings)
    facts = []
    for e in report.results[:3]:
        r = e.result
        rigid = rigid_body_count(r.frequencies, r.eigenvalues)
        if r.n_modes > rigid:
            checks = [c for c in r.metadata.get("checks") or [] if isinstance(c, dict)]
            bands = [c for c in checks if str(c.get("name", "")).startswith("excitation:")]
            bad = [str(c["name"]).split(":", 1)[1] for c in bands if c.get("status") == "fail"]
            band = (f", inside the widened band(s) {', '.join(bad)}" if bad else
                    f", clear of all {len(bands)} excitation band(s)" if bands else "")
            facts.append(f"{e.label}: first elastic mode {r.frequencies[rigid]:.1f} Hz{band}")
    if len(report.results) > 3:
        facts.append(f"{len(report.results) - 3} more result(s)")
    if report.comparisons:
        ok = sum(bool(c.comparison.passed) for c in report.comparisons)
        facts.append(f"{ok} of {len(report.comparisons)} comparison(s) pass")
    for c in report.convergence:
        modes = c.study.get("modes") or []
        conv = sum(1 for m in modes if (m.get("gci") or {}).get("verdict") == "converged")
        facts.append(f"{c.study.get('solver', '')}: {conv} of {len(modes)} mode(s) converged")
    if report.variants:
        done = sum(1 for v in report.variants if v.comparison is not None)
        facts.append(f"{done} of {len(report.variants)} variant(s) compared with the baseline")
    if report.verification is not None:
        cases = report.verification or []
        facts.append(f"{sum(bool(getattr(c, 'passed', False)) for c in cases)} of {len(cases)} verification case(s) pass")
    if report.failed_runs:
        facts.append(f"{len(report.failed_runs)} run(s) failed")
    status = "fail" if nf or report.failed_runs else "warn" if nw else "ok"
    word = {"fail": "FAIL", "warn": "pass with warnings", "ok": "pass"}[status]
    counts = f"{nf} failed, {nw} warning(s)" if status != "ok" else "no failed check, no warning"
    return status, f"Verdict: {word} — {counts}" + ("; " + "; ".join(facts) if facts else "") + "."


def render_page(report: Report, freq_maps: dict[str, bytes] | None = None) -> str:
    """The whole page as one string."""
    freq_maps = freq_maps or {}
    toc = [("findings", "Findings")]
    body = [findings_block(report, "findings")]
    for k, c in enumerate(report.comparisons):
        a = f"comparison-{k + 1}"
        toc.append((a, f"Comparison {k + 1}"))
        body.append(comparison_block(c, a))
    for k, c in enumerate(report.convergence):
        a = f"convergence-{k + 1}"
        toc.append((a, f"Convergence {c.study.get('solver', '')}"))
        body.append(convergence_block(c, a))
    if report.variants or report.baseline:
        toc.append(("variants", "Variants"))
        body.append(variants_block(report.baseline, report.variants, "variants"))
    if report.verification is not None:
        toc.append(("verification", "Verification"))
        body.append(verification_block(report, "verification"))
    for label, text in report.failed_runs:
        body.append(section(f"failed-{len(body)}", f"{label}: failed", tag("p", pill("fail"), " ", text)))
    for e in report.results:
        toc.append((e.anchor, e.label))
        body.append(result_block(e, freq_maps.get(e.anchor)))
    nav = tag("nav", *[Safe(f'<a href="#{esc(a)}">{esc(t)}</a>') for a, t in toc], class_="toc")
    head = Safe(
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{esc(CSP)}">'
        '<meta name="viewport" content="width=device-width,initial-scale=1">'
        '<meta name="referrer" content="no-referrer">'
        f'<meta name="generator" content="modebridge {esc(report.modebridge_version)}">'
        f"<title>{esc(report.title)} — modebridge</title><style>{CSS}</style></head>")
    status, line = verdict(report)
    masthead = tag("header", tag("div", tag("div", _KIND.get(report.kind, "Report"), class_="kind"),
                                 tag("h1", report.title),
                                 tag("p", pill(status), " ", line, class_="verdict", data_status=status),
                                 tag("div", " · ".join(report.sources), class_="src"), class_="inner"),
                   class_="masthead")
    caution = tag("aside", tag("strong", "Caution. "), CAUTION,
                  " A frequency from one mesh and one solver proves little: check convergence and compare "
                  "solvers.", class_="caution", role="note")
    footer = tag("footer", tag("p", CAUTION), tag("p", f"Made by modebridge {report.modebridge_version} on "
                                                       f"{report.created}. Values in SI (lengths shown in mm)."))
    return head + Safe("<body>") + masthead + tag("main", caution, nav, *body) + footer + Safe("</body></html>\n")
