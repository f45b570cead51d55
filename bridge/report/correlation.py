"""A test–analysis correlation as a report section (and a page of its own): the test points
drawn on the part, the paired table, the MAC and auto-MAC heat maps, CoMAC per sensor, the
warnings and the verdict. Same page shell as the other reports (no script, images inline,
every user string escaped)."""

from __future__ import annotations

import datetime as _dt
import io
from pathlib import Path

import numpy as np

from .. import __version__
from ..io import atomic_write_text
from ..plots import figure
from .html import CAUTION, CSP, CSS, Safe, _img, esc, kv, pill, section, table, tag

__all__ = ["correlation_section", "correlation_page", "write_correlation_report", "test_points_png"]


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def _view(points: np.ndarray) -> np.ndarray:
    """Two in-plane axes (3, 2): the part's two largest principal extents."""
    c = points - points.mean(axis=0)
    _, _, vt = np.linalg.svd(c, full_matrices=False)
    return vt[:2].T


def _outline_segments(result) -> np.ndarray:
    """(e, 2, 3) element edges (corner to corner) of the model."""
    from ..compare.mapping import FAMILY_OF_VTK
    from ..mesh import gmsh_order_from_vtk
    from ..modaltest.locate import _HEX_FACES, _TET_FACES

    fam = FAMILY_OF_VTK.get(int(result.cell_type))
    cells = gmsh_order_from_vtk(fam, result.cells)
    if fam.startswith(("tri", "quad")):
        n = 3 if fam.startswith("tri") else 4
        cycles = [tuple(range(n))]
    else:
        cycles = _TET_FACES if fam.startswith("tet") else _HEX_FACES
    pairs = {(c[i], c[(i + 1) % len(c)]) for c in cycles for i in range(len(c))}
    seg = np.concatenate([cells[:, [a, b]] for a, b in sorted(pairs)])
    seg = np.unique(np.sort(seg, axis=1), axis=0)
    return result.points[seg]


def test_points_png(c, result) -> bytes:
    """The part seen along its thinnest direction, its element edges in grey, each test point
    with its label, coloured by CoMAC; sensor directions as arrows; points off the model as ×."""
    V = _view(result.points)
    seg = _outline_segments(result) @ V
    P = c.test.points @ V
    D = c.test.directions @ V
    ext = np.ptp(result.points @ V, axis=0)
    w = 8.0
    h = max(2.5, min(8.0, w * ext[1] / max(ext[0], 1e-12)))
    fig = figure(figsize=(w, h + 0.8), dpi=110)
    ax = fig.subplots()
    from matplotlib.collections import LineCollection

    ax.add_collection(LineCollection(seg, colors="#c5ccd3", linewidths=0.5))
    on = c.on
    cm = np.where(np.isnan(c.comac), 0.0, c.comac)
    sc = ax.scatter(P[on, 0], P[on, 1], c=cm[on], cmap="RdYlGn", vmin=0.5, vmax=1.0, s=46, edgecolors="#1f2933",
                    linewidths=0.6, zorder=3)
    if (~on).any():
        ax.scatter(P[~on, 0], P[~on, 1], marker="x", c="#c92a2a", s=60, zorder=3, label="off the model")
        ax.legend(loc="upper right", fontsize=8)
    L = 0.04 * max(ext)
    for i in range(len(P)):
        if np.linalg.norm(D[i]) > 1e-6:
            ax.annotate("", xy=P[i] + L * D[i], xytext=P[i], arrowprops=dict(arrowstyle="->", color="#0b7285", lw=0.8),
                        zorder=2)
    seen = set()
    for i, lab in enumerate(c.test.point_labels):
        if lab in seen:
            continue
        seen.add(lab)
        ax.annotate(str(lab), P[i], textcoords="offset points", xytext=(4, 4), fontsize=7, color="#1f2933")
    flagged = {f["index"] for f in c.flagged_sensors()}
    for i in flagged:
        ax.scatter([P[i, 0]], [P[i, 1]], s=160, facecolors="none", edgecolors="#c92a2a", linewidths=1.6, zorder=4)
    fig.colorbar(sc, ax=ax, label="CoMAC", shrink=0.8)
    ax.set_aspect("equal")
    ax.autoscale_view()
    ax.set_xlabel("along the part's longest extent [m]")
    ax.set_ylabel("across [m]")
    ax.set_title("test points on the part (arrows: sensor directions in view; red rings: flagged by CoMAC)",
                 fontsize=9)
    fig.tight_layout()
    return _png(fig)


def _comac_png(c) -> bytes:
    lab = c.test.sensor_labels()
    idx = np.flatnonzero(c.on)
    fig = figure(figsize=(max(5.0, 0.22 * len(idx) + 1.5), 2.8), dpi=110)
    ax = fig.subplots()
    vals = c.comac[idx]
    cols = ["#c92a2a" if v < c.thresholds.min_comac else "#2b8a3e" for v in vals]
    ax.bar(range(len(idx)), vals, color=cols)
    ax.axhline(c.thresholds.min_comac, color="#b35c00", lw=1, ls="--")
    ax.set_xticks(range(len(idx)))
    ax.set_xticklabels([lab[i] for i in idx], rotation=90, fontsize=6)
    ax.set_ylim(0, 1.02)
    ax.set_ylabel("CoMAC")
    fig.tight_layout()
    return _png(fig)


def _heat(mat, title, xl, yl) -> bytes:
    m, k = mat.shape
    fig = figure(figsize=(1.6 + 0.42 * k, 1.2 + 0.4 * m), dpi=110)
    ax = fig.subplots()
    im = ax.imshow(mat, vmin=0, vmax=1, cmap="cividis")
    for i in range(m):
        for j in range(k):
            ax.text(j, i, f"{mat[i, j]:.2f}", ha="center", va="center", fontsize=6,
                    color="black" if mat[i, j] > 0.5 else "white")
    ax.set_xticks(range(k))
    ax.set_xticklabels([str(j + 1) for j in range(k)], fontsize=7)
    ax.set_yticks(range(m))
    ax.set_yticklabels([str(i + 1) for i in range(m)], fontsize=7)
    ax.set_xlabel(xl)
    ax.set_ylabel(yl)
    ax.set_title(title, fontsize=9)
    fig.colorbar(im, ax=ax, shrink=0.8)
    fig.tight_layout()
    return _png(fig)


def correlation_section(c, result, anchor: str = "correlation", pictures: bool = True) -> Safe:
    th = c.thresholds
    v = c.pair_verdicts()
    rows = [[x["model_mode"], f"{x['f_model_hz']:.2f}", x["test_mode"], f"{x['f_test_hz']:.2f}",
             (f"{100 * x['df']:+.2f} %", None if x["frequency_ok"] else "bad"),
             (f"{x['mac']:.3f}", None if x["shape_ok"] else "bad"), "" if x["cluster"] is None else f"C{x['cluster']}",
             "–" if x["mpc"] is None else f"{x['mpc']:.3f}", pill(x["ok"])] for x in v]
    b = c.frequency_bias()
    lead = tag("p", pill(c.passed), f" {len(v)} measured mode(s) paired with the model; "
               f"thresholds MAC ≥ {th.min_mac}, |Δf| ≤ {100 * th.max_df:g} %, every measured mode paired.",
               class_="lead")
    facts = kv([("model result", c.model_label), ("measured modes", c.test_label),
                ("sensors", f"{int(c.on.sum())} of {c.test.n_sensors} on the model"),
                ("placement", c.test.placement.describe()), ("file length unit", c.test.length_unit),
                ("off-model tolerance", f"{c.max_distance * 1e3:.3g} mm"),
                ("mean Δf", None if b["mean_df"] is None else f"{100 * b['mean_df']:+.3f} % (spread "
                 f"{100 * b['std_df']:.3f} %; a uniform stiffness scale of {b['stiffness_scale']:.4f} explains the mean)"),
                ("auto-MAC of the measured set", f"largest off-diagonal {c.alias('test')[0]:.3f}"),
                ("auto-MAC of the model at the sensors", f"largest off-diagonal {c.alias('model')[0]:.3f}"),
                ("reading", "; ".join(c.test.notes) or None)])
    parts = [lead, facts, table(["model mode", "f model [Hz]", "test mode", "f test [Hz]", "Δf", "MAC", "cluster",
                                 "MPC", ""], rows, numeric=(0, 1, 2, 3, 4, 5, 7))]
    warn = c.warnings()
    if warn:
        parts.append(tag("h4", "warnings"))
        parts.append(tag("ul", *[tag("li", w) for w in warn], class_="plain"))
    labels = c.test.sensor_labels()
    srows = [[labels[i], ", ".join(f"{x * 1e3:.1f}" for x in c.test.points[i]),
              ", ".join(f"{x:.3f}" for x in c.test.directions[i]), f"{c.located.distance[i] * 1e3:.2f}",
              ("off the model", "bad") if not c.on[i] else
              (f"{c.comac[i]:.3f}", "bad" if c.comac[i] < th.min_comac else None)]
             for i in range(c.test.n_sensors)]
    if pictures:
        parts.append(tag("figure", _img(test_points_png(c, result), "image/png", "test points on the part"),
                         tag("figcaption", "Test points on the model, coloured by CoMAC."), class_="wide"))
        A = c.comparison.mac
        fa = tag("figure", _img(_heat(A, "MAC: model (rows) vs measured (columns)", "measured mode", "model mode"),
                                "image/png", "MAC"), class_="wide")
        fb = tag("figure", _img(_heat(c.auto_mac_test, "auto-MAC of the measured set", "measured mode",
                                      "measured mode"), "image/png", "auto-MAC"), class_="wide")
        parts.append(tag("div", fa, fb, class_="blocks"))
        parts.append(tag("figure", _img(_comac_png(c), "image/png", "CoMAC per sensor"),
                         tag("figcaption", f"CoMAC per sensor (Lieven and Ewins 1988); dashed: {th.min_comac}."),
                         class_="wide"))
    parts.append(tag("details", tag("summary", "sensors"),
                     table(["sensor", "point [mm]", "direction", "distance [mm]", "CoMAC"], srows, numeric=(3, 4))))
    return section(anchor, "Test–analysis correlation", *parts)


def correlation_page(c, result, title: str | None = None) -> str:
    title = title or ((result.metadata.get("model") or {}).get("name") or "correlation")
    created = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
    head = Safe('<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
                f'<meta http-equiv="Content-Security-Policy" content="{esc(CSP)}">'
                '<meta name="viewport" content="width=device-width,initial-scale=1">'
                '<meta name="referrer" content="no-referrer">'
                f'<meta name="generator" content="modebridge {esc(__version__)}">'
                f"<title>{esc(title)} — modebridge</title><style>{CSS}</style></head>")
    masthead = tag("header", tag("div", tag("div", "Test–analysis correlation", class_="kind"), tag("h1", title),
                                 tag("div", f"{c.model_label} · {c.test_label}", class_="src"), class_="inner"),
                   class_="masthead")
    caution = tag("aside", tag("strong", "Caution. "), CAUTION, " A correlation shows consistency of the model "
                  "with one test at the measured points, not correctness elsewhere.", class_="caution", role="note")
    footer = tag("footer", tag("p", CAUTION), tag("p", f"Made by modebridge {__version__} on {created}."))
    return head + Safe("<body>") + masthead + tag("main", caution, correlation_section(c, result)) + footer + \
        Safe("</body></html>\n")


def write_correlation_report(c, result, path: str | Path, title: str | None = None) -> Path:
    return atomic_write_text(Path(path), correlation_page(c, result, title))
