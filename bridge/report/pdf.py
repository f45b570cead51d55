"""The report as a PDF for filing (matplotlib's PdfPages; no other dependency).

It holds what a reviewer files: the verdict line, the caution, the findings, per result the
frequency table with effective masses and their cumulative sums for every requested direction,
the checks, the model picture and the mode pictures, then the charts (frequency maps, MAC heat
maps, convergence plots) and the verification table. Animations do not exist on paper: each
mode is its picture. Pages are A4 portrait.
"""

from __future__ import annotations

import io
import textwrap
from pathlib import Path

import numpy as np

from ..checks import rigid_body_count
from ..io import atomic_path
from .contents import Report, ResultEntry

__all__ = ["write_pdf"]

_A4 = (8.27, 11.69)  #: inches
_COLOUR = {"ok": "#2b8a3e", "warn": "#b35c00", "fail": "#c92a2a", "note": "#5c6b7a"}
_ROWS = 34  #: table rows per page


def _image(data: bytes):
    from PIL import Image

    return np.asarray(Image.open(io.BytesIO(data)).convert("RGB"))


class _Pages:
    def __init__(self, pdf, plt, title: str):
        self.pdf, self.plt, self.title = pdf, plt, title
        self.fig = None
        self.y = 0.0
        self.n = 0

    def new(self):
        self.close()
        self.fig = self.plt.figure(figsize=_A4)
        self.n += 1
        self.fig.text(0.06, 0.975, self.title, fontsize=8, color="#5c6b7a", va="top")
        self.fig.text(0.94, 0.975, f"page {self.n}", fontsize=8, color="#5c6b7a", va="top", ha="right")
        self.y = 0.95
        return self.fig

    def close(self):
        if self.fig is not None:
            self.pdf.savefig(self.fig)
            self.plt.close(self.fig)
            self.fig = None

    def need(self, height: float):
        if self.fig is None or self.y - height < 0.04:
            self.new()

    def text(self, s: str, size: float = 9, colour: str = "#1f2933", weight: str = "normal", width: int = 110):
        lines = textwrap.wrap(s, width=int(width * 9 / size)) or [""]
        h = 0.0045 + len(lines) * size * 1.45 / 72 / _A4[1]
        self.need(h)
        self.fig.text(0.06, self.y, "\n".join(lines), fontsize=size, color=colour, weight=weight, va="top",
                      family="DejaVu Sans", linespacing=1.3)
        self.y -= h

    def table(self, header: list[str], rows: list[list[str]]):
        for start in range(0, max(len(rows), 1), _ROWS):
            chunk = rows[start:start + _ROWS]
            h = 0.017 * (len(chunk) + 1) + 0.01
            self.need(h)
            ax = self.fig.add_axes([0.06, self.y - h, 0.88, h])
            ax.axis("off")
            if chunk:
                t = ax.table(cellText=chunk, colLabels=header, loc="upper center", cellLoc="right",
                             colLoc="right")
                t.auto_set_font_size(False)
                t.set_fontsize(7)
                t.scale(1.0, 0.95)
                for (r, _), cell in t.get_celld().items():
                    cell.set_edgecolor("#d9e1e8")
                    if r == 0:
                        cell.set_facecolor("#f5f8fa")
            self.y -= h

    def picture(self, data: bytes, caption: str, width: float = 0.88):
        img = _image(data)
        h = width * _A4[0] / _A4[1] * img.shape[0] / img.shape[1]
        self.need(h + 0.03)
        ax = self.fig.add_axes([0.06 + (0.88 - width) / 2, self.y - h, width, h])
        ax.imshow(img)
        ax.axis("off")
        self.y -= h + 0.005
        self.text(caption, size=7.5, colour="#5c6b7a")

    def grid(self, items: list[tuple[bytes, str]], cols: int = 2):
        """Pictures side by side, ``cols`` per row."""
        w = 0.88 / cols - 0.01
        for k in range(0, len(items), cols):
            row = items[k:k + cols]
            imgs = [_image(d) for d, _ in row]
            h = max(w * _A4[0] / _A4[1] * im.shape[0] / im.shape[1] for im in imgs)
            self.need(h + 0.025)
            for j, (im, (_, cap)) in enumerate(zip(imgs, row)):
                x = 0.06 + j * (w + 0.01)
                ax = self.fig.add_axes([x, self.y - h, w, h])
                ax.imshow(im)
                ax.axis("off")
                self.fig.text(x, self.y - h - 0.004, cap, fontsize=7.5, color="#1f2933", va="top")
            self.y -= h + 0.025


def _freq_rows(e: ResultEntry) -> tuple[list[str], list[list[str]]]:
    r = e.result
    model = r.metadata.get("model") or {}
    dirs = list((model.get("analysis") or {}).get("mass_directions") or ["x", "y", "z"])
    frac = r.effective_mass_fraction()
    rigid = rigid_body_count(r.frequencies, r.eigenvalues)
    header = ["mode", "f [Hz]"]
    if frac is not None:
        header += [f"m_eff {d}" for d in "xyz"] + [f"Σ {d}" for d in "xyz" if d in dirs]
        cum = np.cumsum(frac, axis=0)
    header.append("note")
    rows = []
    for i in range(r.n_modes):
        row = [str(i + 1), f"{r.frequencies[i]:.2f}"]
        if frac is not None:
            row += [f"{100 * x:.1f} %" for x in frac[i]]
            row += [f"{100 * cum[i, j]:.1f} %" for j, d in enumerate("xyz") if d in dirs]
        row.append("rigid-body mode" if i < rigid else "")
        rows.append(row)
    return header, rows


def write_pdf(report: Report, out: str | Path, freq_maps: dict[str, bytes] | None = None) -> Path:
    """Write ``report`` as a PDF at ``out``."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    from matplotlib.backends.backend_pdf import PdfPages

    from .html import CAUTION, verdict

    freq_maps = freq_maps or {}
    out = Path(out)
    status, line = verdict(report)
    with atomic_path(out) as tmp:
        with PdfPages(tmp, metadata={"Title": f"{report.title} — modebridge",
                                     "Creator": f"modebridge {report.modebridge_version}"}) as pdf:
            pages = _Pages(pdf, plt, f"{report.title} — modebridge {report.modebridge_version}")
            pages.new()
            pages.text(report.title, size=18, weight="bold")
            pages.text(" · ".join(report.sources), size=8, colour="#5c6b7a")
            pages.text(line, size=11, colour=_COLOUR.get(status, "#1f2933"), weight="bold")
            pages.text("Caution. " + CAUTION, size=8.5, colour="#b35c00")
            if report.findings:
                pages.text("Findings", size=12, weight="bold")
                order = {"fail": 0, "warn": 1, "note": 2}
                for f in sorted(report.findings, key=lambda f: order.get(f.level, 3)):
                    pages.text(f"[{f.level}] {f.where}: {f.text}", size=8, colour=_COLOUR.get(f.level, "#1f2933"))
            for c in report.comparisons:
                rc = c.comparison
                pages.text(f"Comparison: {rc.label_a} vs {rc.label_b} — {'pass' if rc.passed else 'FAIL'}",
                           size=12, weight="bold")
                pages.table(["A mode", "f A [Hz]", "B mode", "f B [Hz]", "Δf", "MAC", "ok"],
                            [[str(v["a"] + 1), f"{v['fa']:.2f}", str(v["b"] + 1), f"{v['fb']:.2f}",
                              f"{100 * v['df']:+.3f} %", f"{v['mac']:.3f}", "ok" if v["ok"] else "FAIL"]
                             for v in rc.pair_verdicts()])
                if c.heatmap:
                    pages.picture(c.heatmap, "MAC of the paired modes", width=0.6)
            for c in report.convergence:
                st = c.study
                pages.text(f"Mesh convergence — {st.get('solver', '')}", size=12, weight="bold")
                rows = []
                for m in st.get("modes") or []:
                    g = m.get("gci") or {}
                    f = [x for x in m.get("f_hz") or [] if x is not None]
                    rows.append([str(m.get("mode")), f"{f[-1]:.2f}" if f else "–",
                                 f"{g['extrapolated']:.2f}" if g.get("extrapolated") is not None else "–",
                                 f"{100 * g['gci_fine']:.3f} %" if g.get("gci_fine") is not None else "–",
                                 str(g.get("verdict", "not tracked"))])
                pages.table(["mode", "finest [Hz]", "f_ext [Hz]", "GCI fine", "verdict"], rows)
                for cap, png in c.plots:
                    pages.picture(png, cap, width=0.8)
            if report.variants:
                pages.text("Variants against the baseline", size=12, weight="bold")
                for v in report.variants:
                    rc = v.comparison
                    name = v.data.get("name", "")
                    if rc is None:
                        pages.text(f"{name}: not compared", size=8.5)
                        continue
                    pages.text(name, size=10, weight="bold")
                    pages.table(["baseline mode", "f [Hz]", "variant mode", "f [Hz]", "shift", "MAC"],
                                [[str(p["a"] + 1), f"{p['fa']:.2f}", str(p["b"] + 1), f"{p['fb']:.2f}",
                                  f"{100 * p['df']:+.2f} %", f"{p['mac']:.3f}"] for p in rc.pair_verdicts()])
            if report.verification is not None:
                pages.text("Verification", size=12, weight="bold")
                rows = []
                for case in report.verification or []:
                    for m in getattr(case, "modes", []) or []:
                        rows.append([str(case.name), str(m.mode),
                                     "–" if m.target is None else f"{m.target:.4g}",
                                     "–" if m.value is None else f"{m.value:.4g}",
                                     "pass" if m.passed else "FAIL" if m.passed is False else "–"])
                pages.table(["case", "mode", "target", "value", ""], rows)
            for label, text in report.failed_runs:
                pages.text(f"{label}: failed — {text}", size=9, colour=_COLOUR["fail"])
            for e in report.results:
                r = e.result
                prov = r.metadata.get("provenance") or {}
                if pages.y < 0.6:  # a result starts on a fresh page unless the page is mostly empty
                    pages.new()
                pages.text(f"{e.label} — {(r.metadata.get('model') or {}).get('name') or 'result'}", size=14,
                           weight="bold")
                pages.text(f"{prov.get('solver', '?')} {prov.get('solver_version', '')} "
                           f"({prov.get('element_type', '?')}), {r.n_modes} modes, model mass {r.total_mass:.6g} kg",
                           size=9, colour="#5c6b7a")
                header, rows = _freq_rows(e)
                pages.table(header, rows)
                checks = [c for c in r.metadata.get("checks") or [] if isinstance(c, dict)]
                for c in checks:
                    pages.text(f"[{c.get('status')}] {c.get('name', '')}: {c.get('message', '')}", size=8,
                               colour=_COLOUR.get(str(c.get("status")), "#1f2933"))
                if e.anchor in freq_maps:
                    pages.picture(freq_maps[e.anchor], "Elastic modes against the excitation bands and their margins.")
                if e.model_picture:
                    pages.picture(e.model_picture, "The model as meshed: supported nodes dark red, point masses "
                                                   "orange, beams blue, springs green, rigid couplings purple, "
                                                   "distributing couplings pink.", width=0.7)
                items = [(e.pictures[m], f"Mode {m} · {r.frequencies[m - 1]:.2f} Hz") for m in sorted(e.pictures)]
                if items:
                    pages.grid(items)
                left = sorted(set(e.left_out_pictures))
                if left:
                    pages.text(f"Pictures of modes {', '.join(map(str, left))} left out by the size cap.", size=8,
                               colour="#5c6b7a")
            pages.text(f"Made by modebridge {report.modebridge_version} on {report.created}. " + CAUTION,
                       size=7.5, colour="#5c6b7a")
            pages.close()
    return out
