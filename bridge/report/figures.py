"""Charts for reports, as PNG bytes: the MAC heat map and convergence plots of ``bridge.plots``,
and a frequency map of the modes against the excitation bands (matplotlib, Agg)."""

from __future__ import annotations

import io
import tempfile
from pathlib import Path
from types import SimpleNamespace

import numpy as np

__all__ = ["mac_heatmap_png", "convergence_pngs", "frequency_map_png", "study_from_dict"]


def _through_file(draw) -> bytes:
    with tempfile.TemporaryDirectory(prefix="modebridge-report-") as tmp:
        path = Path(tmp) / "figure.png"
        draw(path)
        return path.read_bytes()


def mac_heatmap_png(mac: np.ndarray, fa, fb, pairs, label_a: str, label_b: str, title: str = "MAC") -> bytes:
    from ..plots import mac_heatmap

    return _through_file(lambda p: mac_heatmap(np.asarray(mac), fa, fb, pairs, p, label_a, label_b, title))


def study_from_dict(d: dict):
    """A stand-in for :class:`bridge.study.converge.ConvergenceStudy` from its ``as_dict`` (as in
    ``convergence.json``), enough for :func:`bridge.plots.convergence_plots`."""
    modes = []
    for m in d.get("modes", []):
        g = m.get("gci")
        modes.append(SimpleNamespace(mode=m.get("mode"), h=m.get("h_m", []), f=m.get("f_hz", []),
                                     slope=float(m.get("slope", float("nan")) or float("nan")),
                                     gci=None if not g else SimpleNamespace(**g)))
    return SimpleNamespace(solver=str(d.get("solver", "")), modes=modes)


def convergence_pngs(study_dict: dict) -> tuple[bytes, bytes]:
    from ..plots import convergence_plots

    st = study_from_dict(study_dict)
    with tempfile.TemporaryDirectory(prefix="modebridge-report-") as tmp:
        a, b = convergence_plots(st, Path(tmp) / "f.png", Path(tmp) / "e.png")
        return a.read_bytes(), b.read_bytes()


def frequency_map_png(frequencies, rigid: int, bands: list[dict], inside: set[int] | None = None) -> bytes:
    """Elastic modes as ticks on a frequency axis, each excitation band shaded (dark) with its
    margin (light); a mode the run's excitation checks found inside a widened band (``inside``,
    1-based mode numbers) is drawn red."""
    from ..plots import figure

    f = np.asarray(frequencies, float)[rigid:]
    fig = figure(figsize=(9.0, 2.1), dpi=110)
    ax = fig.subplots()
    lows = []
    for k, b in enumerate(bands):
        lo, hi, margin = float(b["low"]), float(b["high"]), float(b.get("margin", 0.0))
        wl, wh = lo * (1 - margin), hi * (1 + margin)
        lows.append((wl, wh))
        ax.axvspan(wl, wh, color="#ffd8a8", alpha=0.8, lw=0)
        ax.axvspan(lo, hi, color="#f08c00", alpha=0.85, lw=0)
        ax.text(0.5 * (lo + hi), 1.03 + 0.13 * (k % 2), str(b.get("name", "")), ha="center", va="bottom", fontsize=7,
                transform=ax.get_xaxis_transform(), color="#7a4100")
    for i, x in enumerate(f):
        bad = (rigid + i + 1) in inside if inside is not None else any(wl <= x <= wh for wl, wh in lows)
        ax.axvline(x, ymin=0.08, ymax=0.78, color="#c92a2a" if bad else "#0b7285", lw=2.0 if bad else 1.4)
        ax.text(x, 0.84, str(rigid + i + 1), ha="center", va="bottom", fontsize=6.5,
                transform=ax.get_xaxis_transform(), color="#1f2933")
    top = max([*(f.tolist() or [1.0]), *[wh for _, wh in lows]]) * 1.08
    ax.set_xlim(0, top)
    ax.set_yticks([])
    ax.set_xlabel("frequency [Hz]   (bars: excitation band, light: its margin; lines: elastic modes)", fontsize=8)
    for side in ("left", "right", "top"):
        ax.spines[side].set_visible(False)
    ax.tick_params(axis="x", labelsize=7)
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()
