"""HTML reports of real CalculiX runs, opened in headless Chromium.

How the browser check works (Chromium 156, Debian bookworm): Chromium is started once per page
with ``--headless --screenshot=PNG --dump-dom --enable-logging=stderr --v=0``. It writes the
screenshot, prints the DOM as parsed on stdout, and logs every console message of the page — a
``console.*`` call, an uncaught exception ("Uncaught Error: …") and a Content-Security-Policy
violation alike — on stderr as ``[…:INFO:CONSOLE:<line>] "<message>", source: <url> (<line>)``
(older builds wrote ``CONSOLE(<line>)``; both are matched). The report has no script at all, so
*any* console line is a failure. That the channel works is itself tested on a page that throws
(``test_the_console_check_sees_errors``): if a Chromium update changes the log format, that test
fails instead of the real ones passing blindly. Everything else Chromium logs (D-Bus, GPU) is ignored.
"""

from __future__ import annotations

import base64
import io
import json
import os
import re
import shutil
import signal
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from bridge.compare.results import compare_results
from bridge.pipeline import run_model
from bridge.plots import convergence_plots
from bridge.report import build_comparison_report, build_report, render_page, report_for_results
from bridge.report.html import CAUTION
from bridge.results import ModalResult
from bridge.study.converge import run_convergence

ROOT = Path(__file__).resolve().parents[3]
DEMO = ROOT / "examples" / "cover_panel.toml"
SCRIPT = "<script>alert(1)</script>"
IMG = "<img src=x onerror=alert(1)>"
_CONSOLE = re.compile(r':CONSOLE(?::\d+|\(\d+\))\] "(?P<msg>.*)", source: (?P<src>\S*) \(\d+\)')


# --- the browser ---------------------------------------------------------------------------

def _chromium() -> str:
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    if os.environ.get("CI"):
        pytest.fail("headless Chromium missing in CI: scripts/install must install Debian's 'chromium'")
    pytest.skip("chromium not installed (apt-get install -y chromium)")


def open_in_chromium(page: Path, tmp_path: Path, shot: Path) -> tuple[str, list[str]]:
    """Load ``page``; returns the DOM Chromium built and the console messages the page caused.
    The screenshot goes to ``shot``."""
    exe = _chromium()
    profile = tmp_path / f"chromium-profile-{shot.stem}"
    cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           "--hide-scrollbars", f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0",
           f"--screenshot={shot}", "--window-size=1280,2000", "--dump-dom", page.resolve().as_uri()]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            errors="replace", start_new_session=True)
    try:
        out, err = proc.communicate(timeout=60)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate()
        pytest.fail(f"chromium did not finish loading {page} within 60 s")
    assert proc.returncode == 0, err[-2000:]
    console = [m.group("msg") for m in _CONSOLE.finditer(err)]
    console += [line for line in err.splitlines() if "Uncaught" in line and not _CONSOLE.search(line)]
    return out, console


def test_the_console_check_sees_errors(tmp_path):
    # the positive control of the check used below: a page that logs, throws, and loads an image
    # its Content-Security-Policy forbids; all three must be caught
    page = tmp_path / "bad.html"
    page.write_text('<!DOCTYPE html><html><head><meta charset="utf-8">'
                    "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; "
                    "img-src data:; script-src 'unsafe-inline'\"></head><body><p>x</p>"
                    '<img src="x.png"><script>console.error("logged"); throw new Error("boom");</script>'
                    "</body></html>", encoding="utf-8")
    dom, console = open_in_chromium(page, tmp_path, tmp_path / "bad.png")
    assert "<p>x</p>" in dom
    assert any("Uncaught Error: boom" in m for m in console), console
    assert any("logged" in m for m in console), console
    assert any("Content Security Policy" in m for m in console), console


# --- reading a report back ------------------------------------------------------------------

class _Page(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[str] = []
        self.imgs: list[dict] = []
        self.links: list[str] = []
        self.text: list[str] = []
        self.attrs: set[str] = set()

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        a = dict(attrs)
        self.attrs.update(k for k, _ in attrs)
        if tag == "img":
            self.imgs.append(a)
        for k in ("href", "src", "action"):
            if k in a and tag != "img":
                self.links.append(a[k])

    def handle_data(self, data):
        self.text.append(data)


def _decode(src: str) -> Image.Image:
    m = re.fullmatch(r"data:image/(png|gif);base64,([A-Za-z0-9+/=]+)", src)
    assert m, src[:60]
    im = Image.open(io.BytesIO(base64.b64decode(m.group(2), validate=True)))
    im.load()
    assert im.format == m.group(1).upper()
    return im


def _colours(arr: np.ndarray) -> int:
    rgb = arr.reshape(-1, 3).astype(np.int64)
    return int(np.unique((rgb[:, 0] << 16) | (rgb[:, 1] << 8) | rgb[:, 2]).size)


def check_page(html_path: Path, tmp_path: Path, min_pictures: int) -> tuple[_Page, str]:
    """Self-contained, every image decodable, mode pictures real and distinct, opened in Chromium
    without a console message; returns the parsed page and its text."""
    html = html_path.read_text(encoding="utf-8")
    page = _Page()
    page.feed(html)
    assert "script" not in page.tags and "link" not in page.tags and "iframe" not in page.tags
    assert not [k for k in page.attrs if k.startswith("on")]  # no event handler attribute at all
    assert all(x.startswith("#") for x in page.links), page.links  # in-page anchors only: no network
    assert not re.search(r"(?i)\b(src|href)\s*=\s*[\"']?(https?:)?//", html)
    assert page.imgs
    pictures = {}
    for a in page.imgs:
        im = _decode(a["src"])
        if "mode-animation" in a.get("class", ""):
            # about 12 frames of ±sin scaling (bridge.report.render.FRAMES), and the part moves
            assert im.n_frames >= 12
            im.seek(0)
            f0 = np.asarray(im.convert("RGB"), float)
            im.seek(3)
            f3 = np.asarray(im.convert("RGB"), float)
            assert np.abs(f0 - f3).mean() > 1.0  # common practice, no source
        if "mode-picture" in a.get("class", ""):
            pictures[(a.get("data-result"), a["data-mode"])] = np.asarray(im.convert("RGB"), float)
    assert len(pictures) >= min_pictures
    for arr in pictures.values():
        # a real render, not an empty canvas: the background alone has std 0 (common practice, no source)
        assert arr.std() > 20.0
        assert _colours(arr) > 200
    by_result: dict = {}
    for (res, mode), arr in pictures.items():
        by_result.setdefault(res, []).append(arr)
    for arrs in by_result.values():
        for i in range(len(arrs)):
            for j in range(i + 1, len(arrs)):
                # different modes give different pictures (common practice, no source)
                assert np.abs(arrs[i] - arrs[j]).mean() > 1.0
    text = " ".join(" ".join(page.text).split())
    assert CAUTION in text

    shot = tmp_path / f"{html_path.stem}-screenshot.png"
    dom, console = open_in_chromium(html_path, tmp_path, shot)
    assert console == [], console  # no script error, no blocked load, no message at all
    dom_page = _Page()
    dom_page.feed(dom)
    assert "script" not in dom_page.tags
    assert len(dom_page.imgs) == len(page.imgs)  # every image is in the DOM Chromium built
    snap = np.asarray(Image.open(shot).convert("RGB"), float)
    assert snap.shape[:2] == (2000, 1280)
    # not a blank page: many colours and contrast (common practice, no source)
    assert snap.std() > 15.0 and _colours(snap) > 100
    return page, text


def _escaped_in(html: str, raw: str) -> bool:
    import html as h

    return h.escape(raw, quote=True) in html


# --- the reports ------------------------------------------------------------------------------

@pytest.mark.solver
def test_report_of_the_demo(ccx, tmp_path):
    out = tmp_path / "demo"
    _, outcomes = run_model(DEMO, out)
    assert outcomes[0].ok
    # a verify.json beside the run, as `modebridge verify` writes it, with one mode out of tolerance
    (out / "verify.json").write_text(json.dumps([
        {"case": "plate_clamped", "title": "Clamped square plate", "solver": "calculix", "family": "quad8",
         "element": "S8R", "source": "Leissa 1969", "tolerance_note": "",
         "modes": [{"mode": 1, "target_hz": 1793.0, "value_hz": 1795.1, "deviation": 0.00117, "tolerance": 0.01,
                    "passed": True},
                   {"mode": 2, "target_hz": 3657.0, "value_hz": 3720.0, "deviation": 0.0172, "tolerance": 0.01,
                    "passed": False}], "passed": False, "error": None, "note": ""},
        {"case": "odd", "modes": [{"what": "nothing useful"}]}]))
    path = build_report(out, tmp_path / "demo.html")
    page, text = check_page(path, tmp_path, min_pictures=8)
    r = outcomes[0].result
    # the table holds every mode, as the run printed it (README: 130.07 Hz first)
    for f in r.frequencies:
        assert f"{f:.2f}" in text
    assert "90% of the mass reached at mode" in text  # the 90 % rule, EN 1998-1 §4.3.3.3.1
    assert "enclosure cover panel" in text and "al6061" in text and "68.9 GPa" in text and "0.2 kg" in text
    assert "screwed_rim" in text and "simply_supported" in text and "fan_shaft" in text
    for c in outcomes[0].checks:  # every check with its message
        assert " ".join(c.message.split()) in text
    for w in r.metadata["provenance"]["solver_warnings"]:  # every solver warning, in the findings
        assert w in text
    assert "Verification" in text and "plate_clamped — Clamped square plate" in text and "Leissa 1969" in text
    assert "case odd, entry 1: no target, value or verdict found" in text.replace("'", "")
    assert r.metadata["provenance"]["model_hash"] in text
    assert "S8R — quad8, the model's family" in text  # which element the solver got and why
    assert any(a.get("data-kind") == "frequency-map" for a in page.imgs)


@pytest.mark.solver
def test_comparison_report_of_two_meshes(ccx, plate, write_model, tmp_path):
    def model(div, name):
        text = plate("quad8", div, "clamped", modes=4)
        # a crafted description (the name is held to a pattern by the schema; a description is free)
        text = text.replace('name = "steel plate clamped"',
                            f'name = "steel plate clamped"\ndescription = "{SCRIPT} and {IMG} & more"', 1)
        return write_model(text, name)

    a = run_model(model((8, 8), "a.toml"), tmp_path / "a")[1][0]
    b = run_model(model((10, 10), "b.toml"), tmp_path / "b")[1][0]
    assert a.ok and b.ok
    path = build_comparison_report([tmp_path / "a" / "calculix", tmp_path / "b" / "calculix"],
                                   tmp_path / "compare.html")
    html = path.read_text(encoding="utf-8")
    assert SCRIPT not in html and IMG not in html  # the raw tags are absent …
    assert _escaped_in(html, SCRIPT) and _escaped_in(html, IMG)  # … their escaped text is there
    page, text = check_page(path, tmp_path, min_pictures=8)
    assert f"{SCRIPT} and {IMG} & more" in text  # shown as text
    assert any(x.get("data-kind") == "mac" for x in page.imgs)
    assert "Comparison:" in text and "mapped" in text
    # the first mode pairs across the meshes: same (1,1) shape (common practice, no source)
    v = next(x for x in compare_results(a.result, b.result).pair_verdicts() if x["a"] == 1)
    assert v["mac"] > 0.99 and f"{v['mac']:.3f}" in text


@pytest.mark.solver
def test_report_of_a_convergence_study(ccx, plate, write_model, tmp_path):
    path = write_model(plate("quad8", (3, 3), "clamped", modes=4))
    study = tmp_path / "study"
    studies = run_convergence(path, study, levels=3)
    # what `modebridge converge` writes beside the runs (bridge/cli/study.py)
    payload = []
    for st in studies:
        pf, pe = convergence_plots(st, study / f"convergence_{st.solver}.png", study / f"error_{st.solver}.png")
        d = st.as_dict()
        d["plots"] = [str(pf), str(pe)]
        payload.append(d)
    (study / "convergence.json").write_text(json.dumps(payload, indent=2))
    out = build_report(study, tmp_path / "converge.html")
    page, text = check_page(out, tmp_path, min_pictures=4)
    assert sum(a.get("data-kind") == "convergence" for a in page.imgs) == 2
    assert "Mesh convergence — calculix" in text and "finest level (L2)" in text
    m1 = studies[0].modes[0]
    assert f"{m1.f[-1]:.2f}" in text and m1.gci.verdict in text
    # without the PNGs the plots are drawn again from convergence.json
    for p in study.glob("*.png"):
        p.unlink()
    again = build_report(study, tmp_path / "converge2.html", pictures=False)
    html = again.read_text(encoding="utf-8")
    assert html.count('data-kind="convergence"') == 2 and "plots redrawn from convergence.json" in html


def _crafted_result() -> ModalResult:
    rng = np.random.default_rng(3)
    pts = np.column_stack([np.repeat(np.arange(3), 3), np.tile(np.arange(3), 3), np.zeros(9)]) * 0.05
    cells = np.array([[0, 1, 4, 3], [1, 2, 5, 4], [3, 4, 7, 6], [4, 5, 8, 7]])
    freqs = np.array([100.0, 250.0, 400.0])
    evil = {"name": SCRIPT, "description": f"{IMG}\n\"quoted\" & <b>bold</b>",
            "geometry": {"kind": "plate", "length": 0.1, "width": 0.1, "origin": [0, 0, 0]},
            "materials": {"<b>steel</b>": {"youngs_modulus": 2.1e11, "poisson_ratio": 0.3, "density": 7850.0}},
            "section": {"kind": "shell", "material": "<b>steel</b>", "thickness": 0.002},
            "regions": {'rim"><script>x()</script>': {"select": "sides", "sides": ["xmin"]}},
            "supports": [{"region": 'rim"><script>x()</script>', "kind": "clamped"}],
            "masses": [{"name": "<iframe src=//evil>", "mass": 0.1, "at": [0.05, 0.05, 0.0]}],
            "excitation": [{"name": "<svg onload=alert(1)>", "low": 90.0, "high": 110.0, "margin": 0.1}],
            "analysis": {"modes": 3, "mass_directions": ["z"]}}
    return ModalResult(
        frequencies=freqs, eigenvalues=(2 * np.pi * freqs) ** 2, points=pts, node_ids=np.arange(1, 10),
        cell_type=9, cells=cells, shapes=rng.normal(size=(3, 9, 3)), effective_mass=rng.random((3, 6)) * 0.01,
        total_effective_mass=rng.random(6), total_mass=0.157,
        metadata={"model": evil, "provenance": {"solver": "<script>s()</script>", "model_name": SCRIPT,
                                                "solver_warnings": ["</table><script>w()</script>"],
                                                "command": ["ccx", "-i", "<job>"],
                                                "element": {"family": "quad4", "element_type": "S4",
                                                            "reason": f"quad4 {IMG}"},
                                                "solver_options": {"opt": SCRIPT}},
                  "checks": [{"name": "excitation:<svg onload=alert(1)>", "status": "fail",
                              "message": f"mode 1 inside {SCRIPT}"}]})


def test_the_renderer_escapes_every_user_string():
    # no solver: the name here breaks the schema's TITLE_PATTERN on purpose, to test the renderer alone
    report = report_for_results([(f"label {SCRIPT}", _crafted_result())])
    html = render_page(report)
    page = _Page()
    page.feed(html)
    assert set(page.tags) & {"script", "iframe", "svg", "b"} == set()
    assert not [k for k in page.attrs if k.startswith("on")]
    for raw in (SCRIPT, IMG, "<b>steel</b>", 'rim"><script>', "<iframe src=//evil>", "<svg onload=alert(1)>",
                "</table><script>w()</script>", "<script>s()</script>", "<job>"):
        assert raw not in html
        assert _escaped_in(html, raw), raw
    text = " ".join(page.text)
    assert SCRIPT in text and "<svg onload=alert(1)>" in text  # shown to the reader as text
    import html as h

    assert "Content-Security-Policy" in html and "default-src 'none'" in h.unescape(html)  # nothing could run
    # the failed check and the solver warning are findings
    assert "mode 1 inside" in text and "solver warning: </table><script>w()</script>" in text
