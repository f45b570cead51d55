"""Reports: renders reused by result hash, the size cap and its stated rule, the verdict line in
both directions, the model picture, the PDF, and log-log labels that do not overlap. These
check contents, not time (the times are in benchmarks/bench_report.py)."""

from __future__ import annotations

import base64
import io
import re
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from PIL import Image

from bridge.pipeline import run_model
from bridge.report import build_report
from bridge.report.build import RENDER_DIR, collect
from bridge.report.html import verdict

MASS = """
[[masses]]
name = "sensor"
mass = "0.02 kg"
at = ["70 mm", "40 mm", "0 mm"]

[[excitation]]
name = "{name}"
low = "{low}"
high = "{high}"
margin = 0.1
"""


def _run(write_model, plate, tmp_path: Path, low="20 Hz", high="30 Hz", name="pump") -> Path:
    text = plate("quad4", (6, 6), "clamped", modes=4, extra="") + MASS.format(name=name, low=low, high=high)
    path = write_model(text, f"plate_{name}.toml")
    out = tmp_path / f"run_{name}"
    _, outcomes = run_model(path, out)
    assert outcomes[0].ok
    return out


def _imgs(html: str, kind: str) -> list[bytes]:
    found = []
    for tag in re.findall(r"<img[^>]*>", html):
        if kind in tag:
            m = re.search(r'src="data:image/\w+;base64,([^"]+)"', tag)
            found.append(base64.b64decode(m.group(1)))
    return found


@pytest.mark.solver
def test_renders_are_reused_and_the_page_keeps_what_it_had(ccx, write_model, plate, tmp_path, monkeypatch):
    out = _run(write_model, plate, tmp_path)
    first = build_report(out, tmp_path / "a.html").read_text(encoding="utf-8")
    cached = sorted((out / "calculix" / RENDER_DIR).glob("*-m*.png"))
    assert len(cached) == 4  # one picture per mode, kept beside the result (and the model picture)
    assert len(list((out / "calculix" / RENDER_DIR).glob("model-*.png"))) == 1
    # a second report draws nothing: the renderer would fail if called
    import bridge.report.render as render

    def refuse(*a, **k):
        raise AssertionError("rendered again")

    monkeypatch.setattr(render, "render_model", refuse)
    monkeypatch.setattr(render, "draw_tasks", refuse)
    second = build_report(out, tmp_path / "b.html").read_text(encoding="utf-8")
    assert _imgs(first, "mode-picture") == _imgs(second, "mode-picture") and len(_imgs(second, "mode-picture")) == 4
    assert _imgs(first, "mode-animation") == _imgs(second, "mode-animation") and len(_imgs(second, "mode-animation")) == 4
    assert len(_imgs(second, "model-picture")) == 1
    assert "not drawn" not in second


@pytest.mark.solver
def test_renders_shared_with_a_drawing_process_are_those_drawn_alone(ccx, write_model, plate, tmp_path):
    # two processes take the modes one at a time (bridge.report.build._start_renders): every mode
    # gets its picture and animation, the same bytes as when this process draws them all
    # (offscreen software rendering is deterministic; common practice, no source)
    out = _run(write_model, plate, tmp_path)
    shared = build_report(out, tmp_path / "shared.html", workers=2).read_text(encoding="utf-8")
    for d in out.rglob(RENDER_DIR):
        for f in d.iterdir():
            f.unlink()
    alone = build_report(out, tmp_path / "alone.html", workers=1).read_text(encoding="utf-8")
    assert len(_imgs(shared, "mode-picture")) == 4 and len(_imgs(shared, "mode-animation")) == 4
    assert _imgs(shared, "mode-picture") == _imgs(alone, "mode-picture")
    assert _imgs(shared, "mode-animation") == _imgs(alone, "mode-animation")
    assert "not drawn" not in shared


@pytest.mark.solver
def test_model_picture_marks_supports_and_masses(ccx, write_model, plate, tmp_path):
    out = _run(write_model, plate, tmp_path)
    html = build_report(out, tmp_path / "r.html", animations=False).read_text(encoding="utf-8")
    (png,) = _imgs(html, "model-picture")
    rgb = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)
    # the support dots (#a61e4d) and the mass ball (#f08c00) are drawn (common practice, no source)
    red = ((np.abs(rgb - [0xA6, 0x1E, 0x4D]).sum(axis=2)) < 60).sum()
    orange = ((np.abs(rgb - [0xF0, 0x8C, 0x00]).sum(axis=2)) < 90).sum()
    assert red > 100 and orange > 30
    # 6 × 6 quad4 plate clamped on its rim: 24 supported nodes (4 × 6), one point mass
    assert "24 supported node(s)" in html and "1 point mass(es)" in html
    assert not _imgs(html, "mode-animation")  # --no-animations


@pytest.mark.solver
def test_size_cap_leaves_out_animations_first_and_says_so(ccx, write_model, plate, tmp_path):
    out = _run(write_model, plate, tmp_path)
    full = build_report(out, tmp_path / "full.html", max_bytes=0)
    cap = full.stat().st_size - 50_000  # a cap the full page misses
    capped = build_report(out, tmp_path / "capped.html", max_bytes=cap)
    html = capped.read_text(encoding="utf-8")
    assert capped.stat().st_size <= cap
    assert len(_imgs(html, "mode-picture")) == 4  # pictures stay while leaving animations out suffices
    assert 0 < len(_imgs(html, "mode-animation")) < 4
    assert "Left out to hold the report below its size cap" in html and "size cap" in html
    # the highest modes go first: what is left out ends with mode 4
    left = re.search(r"the animations of modes ([0-9–, ]+)", html).group(1).strip()
    assert left.endswith("4")


@pytest.mark.solver
def test_verdict_line_is_right_both_ways(ccx, write_model, plate, tmp_path):
    clear = _run(write_model, plate, tmp_path, low="20 Hz", high="30 Hz", name="pump")
    status, line = verdict(collect(clear))
    assert status in ("ok", "warn") and "FAIL" not in line and "clear of all 1 excitation band(s)" in line
    # a band over the first mode (the clamped plate's f1 ≈ 1.8 kHz, Leissa 1969): the verdict fails
    hit = _run(write_model, plate, tmp_path, low="1000 Hz", high="3000 Hz", name="hum")
    status, line = verdict(collect(hit))
    assert status == "fail" and line.startswith("Verdict: FAIL") and "hum" in line
    html = build_report(hit, tmp_path / "hit.html", pictures=False).read_text(encoding="utf-8")
    assert 'class="verdict" data-status="fail"' in html


@pytest.mark.solver
def test_pdf_is_written(ccx, write_model, plate, tmp_path):
    out = _run(write_model, plate, tmp_path)
    pdf = build_report(out, tmp_path / "r.pdf", animations=False)
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF") and data.rstrip().endswith(b"%%EOF")
    assert len(re.findall(rb"/Type /Page[^s]", data)) >= 2
    assert len(re.findall(rb"/Subtype /Image", data)) >= 4  # the mode pictures at least


def test_log_log_tick_labels_do_not_overlap(tmp_path):
    from bridge.plots import convergence_plots

    gci = SimpleNamespace(extrapolated=100.0, gci_fine=0.001, verdict="converged", f=[100.0, 100.5, 101.0])
    # levels 1.6, 1.23, 0.947 mm (ratio 1.3): matplotlib's own labels overlap on this axis
    # (measured with matplotlib 3.11: "9×10⁻¹" runs into "10⁰")
    modes = [SimpleNamespace(mode=k, h=[0.0016, 0.00123, 0.000947], f=[100 + 4 * k, 100 + 2 * k, 100 + k],
                             gci=gci, slope=2.0) for k in (1, 2)]
    st = SimpleNamespace(solver="x", modes=modes)
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    captured = {}
    orig = plt.Figure.savefig

    def spy(self, *a, **k):
        captured.setdefault("figs", []).append(self)
        return orig(self, *a, **k)

    plt.Figure.savefig = spy
    try:
        convergence_plots(st, tmp_path / "f.png", tmp_path / "e.png")
    finally:
        plt.Figure.savefig = orig
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    fig = captured["figs"][-1]  # the log-log error plot (closed after saving: give it a canvas again)
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    ax = fig.axes[0]
    renderer = canvas.get_renderer()
    for axis in (ax.xaxis, ax.yaxis):
        boxes = [t.get_window_extent(renderer) for t in axis.get_ticklabels(minor=False) + axis.get_ticklabels(minor=True)
                 if t.get_visible() and t.get_text()]
        assert boxes, "no labels at all"
        for i in range(len(boxes)):
            for j in range(i + 1, len(boxes)):
                assert not boxes[i].overlaps(boxes[j]), [t.get_text() for t in axis.get_ticklabels()]


@pytest.mark.solver
def test_renders_in_worker_processes(ccx, write_model, plate, tmp_path):
    # two drawing processes (spawned): every mode gets its picture and animation, none is lost
    out = _run(write_model, plate, tmp_path)
    html = build_report(out, tmp_path / "p.html", workers=2).read_text(encoding="utf-8")
    assert len(_imgs(html, "mode-picture")) == 4 and len(_imgs(html, "mode-animation")) == 4
    assert "not drawn" not in html
    assert len(list((out / "calculix" / RENDER_DIR).glob("*-m*.gif"))) == 4


def _colour_pixels(png: bytes, hex_colour: str, tol: int = 60) -> int:
    rgb = np.asarray(Image.open(io.BytesIO(png)).convert("RGB")).astype(int)
    target = [int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)]
    return int(((np.abs(rgb - target).sum(axis=2)) < tol).sum())


@pytest.mark.solver
def test_model_picture_draws_springs_couplings_and_beams(ccx, tmp_path):
    """The isolated box (four springs to the ground, one rigid coupling, a mass with inertia drawn
    once at its centre of gravity) and the frame cantilever (40 beam elements) have them drawn and
    named in the caption."""
    from bridge.verify import BUILTIN

    root = Path(__file__).resolve().parents[3]
    box = tmp_path / "box.toml"
    box.write_text((root / "examples" / "isolated_instrument_box.toml").read_text(encoding="utf-8"), encoding="utf-8")
    frame = tmp_path / "frame.toml"
    frame.write_text((BUILTIN / "frame_cantilever" / "model.toml").read_text(encoding="utf-8"),
                     encoding="utf-8")
    for path in (box, frame):
        _, (o,) = run_model(path, tmp_path / path.stem, solvers=["calculix"])
        assert o.ok, o.error
    html = build_report(tmp_path / "box", tmp_path / "box.html", animations=False).read_text(encoding="utf-8")
    (png,) = _imgs(html, "model-picture")
    # the springs (#2b8a3e) and the rigid coupling's spokes (#862e9c) are drawn (common practice, no source)
    assert _colour_pixels(png, "#2b8a3e") > 50 and _colour_pixels(png, "#862e9c") > 50
    assert "4 spring(s) as green lines (4 to the ground" in html and "1 rigid coupling(s)" in html
    # the six satellites that carry the box's inertia are one mass at its centre of gravity
    assert "1 point mass(es)" in html
    html = build_report(tmp_path / "frame", tmp_path / "frame.html", animations=False).read_text(encoding="utf-8")
    (png,) = _imgs(html, "model-picture")
    assert _colour_pixels(png, "#1864ab") > 200  # the beam line (common practice, no source)
    assert "40 beam element(s) as thick blue lines" in html and "1 supported node(s)" in html
