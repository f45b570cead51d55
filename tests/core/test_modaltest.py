"""Test and analysis together (issue 14), without a solver: file formats, placement, complex
shapes, correlation, CoMAC, Effective Independence, and the commands' errors.

The model here is a structured quad4 grid carrying the analytic modes of a simply supported
rectangular plate, w = sin(mπx/a)·sin(nπy/b) (Navier; Leissa, NASA SP-160, 1969), with
frequencies ∝ (m/a)² + (n/b)².
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.compare.mac import mac_matrix
from bridge.modaltest.correlate import CorrelationThresholds, comac, correlate
from bridge.modaltest.csvfile import read_csv, write_csv
from bridge.modaltest.locate import locate_on_model, model_at
from bridge.modaltest.efi import effective_independence, fisher
from bridge.modaltest.measured import MeasuredModes, Placement, TestDataError, mpc, real_modes
from bridge.modaltest.plan import candidates_from_model, parse_modes, plan_test
from bridge.modaltest.uff import read_uff, read_uff_sets, write_uff
from bridge.results import ModalResult, save_result

A, B = 0.24, 0.16
MN = [(1, 1), (2, 1), (1, 2), (3, 1), (2, 2), (3, 2)]


def plate_result(nx: int = 24, ny: int = 16, a: float = A, b: float = B) -> ModalResult:
    x, y = np.meshgrid(np.linspace(0, a, nx + 1), np.linspace(0, b, ny + 1), indexing="ij")
    pts = np.column_stack([x.ravel(), y.ravel(), np.zeros(x.size)])
    idx = np.arange(x.size).reshape(nx + 1, ny + 1)
    cells = np.array([[idx[i, j], idx[i + 1, j], idx[i + 1, j + 1], idx[i, j + 1]]
                      for i in range(nx) for j in range(ny)])
    f0 = 100.0
    freqs = np.array([f0 * ((m / a) ** 2 + (n / b) ** 2) / ((1 / a) ** 2 + (1 / b) ** 2) for m, n in MN])
    shapes = np.zeros((len(MN), pts.shape[0], 3))
    for k, (m, n) in enumerate(MN):
        shapes[k, :, 2] = np.sin(m * np.pi * pts[:, 0] / a) * np.sin(n * np.pi * pts[:, 1] / b)
    return ModalResult(frequencies=freqs, eigenvalues=(2 * np.pi * freqs) ** 2, points=pts,
                       node_ids=np.arange(1, pts.shape[0] + 1), cell_type=9, cells=cells, shapes=shapes,
                       metadata={"model": {"name": "analytic plate"}})


def grid_sensors(result: ModalResult, nx=5, ny=4, noise=0.0, seed=0, placement=None, unit="m") -> MeasuredModes:
    xs = (np.arange(nx) + 0.5) / nx * A
    ys = (np.arange(ny) + 0.5) / ny * B
    P = np.array([[x, y, 0.0] for x in xs for y in ys])
    D = np.tile([0.0, 0.0, 1.0], (len(P), 1))
    S = model_at(result, locate_on_model(result, P), D)  # the (bilinear) model's own values there
    if noise:
        rng = np.random.default_rng(seed)
        S = S + noise * np.abs(S).max(axis=1, keepdims=True) * rng.standard_normal(S.shape)
    return MeasuredModes(points=P, directions=D, point_labels=[str(10 + i) for i in range(len(P))],
                         frequencies=result.frequencies.copy(), shapes=S, length_unit=unit,
                         placement=placement or Placement())


@pytest.fixture
def result():
    return plate_result()


# --- file formats -------------------------------------------------------------------------

def test_uff_round_trip_of_a_plan_is_exact(result, tmp_path):
    res_path = save_result(result, tmp_path / "result.vtkhdf")
    runner = CliRunner()
    out = runner.invoke(app, ["plan-test", str(res_path), "--sensors", "10", "--out", str(tmp_path / "plan.uff"),
                              "--json"])
    assert out.exit_code == 0, out.output
    plan = json.loads(out.stdout)
    assert len(plan["sensors"]) == 10
    back = read_uff(tmp_path / "plan.uff")
    # frequencies come back bit for bit (the full value rides in ID line 4; the E13.5 field agrees)
    assert back.frequencies.tolist() == result.frequencies.tolist()
    res = runner.invoke(app, ["correlate", str(res_path), str(tmp_path / "plan.uff"), "--json"])
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    for p in d["pairs"]:
        assert p["model_mode"] == p["test_mode"]
        assert p["df"] == 0.0  # frequencies exact
        # MAC 1 to 1e-9: dataset 55 keeps 6 significant digits, 1 − MAC ~ (5e-6)² (issue acceptance)
        assert p["mac"] >= 1 - 1e-9
    assert d["passed"] is True


def test_csv_round_trip_and_units(result, tmp_path):
    m = grid_sensors(result, unit="mm")
    write_csv(m, tmp_path / "m.csv")
    text = (tmp_path / "m.csv").read_text()
    assert "# length_unit = mm" in text
    back = read_csv(tmp_path / "m.csv")
    np.testing.assert_allclose(back.points, m.points, rtol=0, atol=1e-12)  # mm written, m read (exact repr)
    assert back.frequencies.tolist() == m.frequencies.tolist()
    np.testing.assert_array_equal(back.shapes, m.shapes)
    # without the unit line the file is refused, naming the fix
    (tmp_path / "n.csv").write_text(text.replace("# length_unit = mm\n", ""))
    with pytest.raises(TestDataError, match="units missing"):
        read_csv(tmp_path / "n.csv")


def test_test_frame_placement_and_rotated_sensor_direction(result, tmp_path):
    # a test frame rotated 90° about z, its origin at (240, 0, 0) mm, written in millimetres
    (tmp_path / "frame.toml").write_text('origin = ["240 mm", "0 mm", "0 mm"]\nx_axis = [0, 1, 0]\n'
                                         'y_axis = [-1, 0, 0]\n')
    pl = Placement.from_toml(tmp_path / "frame.toml")
    m = grid_sensors(result, placement=pl, unit="mm")
    # one sensor tilted 30° out of the plate's normal towards x: a direction no axis of the test frame has
    d = np.array([np.sin(np.radians(30)), 0.0, np.cos(np.radians(30))])
    m.directions[3] = d
    m.shapes[:, 3] *= np.cos(np.radians(30))  # a plate mode moves along z only: the sensor sees w·cos 30°
    assert np.allclose(m.shapes[:, 3], model_at(result, locate_on_model(result, m.points[3:4]), d[None])[:, 0])
    write_uff(m, tmp_path / "t.uff")
    sets = read_uff_sets(tmp_path / "t.uff")
    cs = [s for s in sets if s["type"] == 2420][0]
    assert len(cs["CS_sys_labels"]) == 2  # the global system and the tilted sensor's own
    raw = [s for s in sets if s["type"] == 2411][0]
    # coordinates in the file are in the test frame, in mm: the part's (x, y) is the test's (y, 240 − x)
    np.testing.assert_allclose(raw["x"][0], m.points[0, 1] * 1e3, atol=1e-9)
    np.testing.assert_allclose(raw["y"][0], (0.24 - m.points[0, 0]) * 1e3, atol=1e-9)
    back = read_uff(tmp_path / "t.uff", placement=pl)
    order = np.argsort([int(x) for x in back.point_labels], kind="stable")
    np.testing.assert_allclose(back.points[order], m.points, atol=1e-12)
    np.testing.assert_allclose(back.directions[order], m.directions, atol=1e-12)
    c = correlate(result, back)
    assert c.passed and min(p.mac for p in c.comparison.pairs) > 1 - 1e-9
    assert not c.flagged_sensors()
    # read without the placement, points land beside the plate or at the wrong places: the verdict fails
    wrong = correlate(result, read_uff(tmp_path / "t.uff"))
    assert wrong.off_model() and not wrong.passed


def test_complex_shapes_reduced_with_mpc():
    # hand check: z = (1, 1+i): ΣRe² = 2, ΣIm² = 1, ΣReIm = 1 → MPC = ((2−1)² + 4·1²)/(2+1)² = 5/9
    # (Pappa, Elliott and Schenk 1993, eigenvalue form)
    assert mpc(np.array([1, 1 + 1j])) == pytest.approx(5 / 9, rel=1e-12)
    assert mpc(np.array([1, 1j])) == pytest.approx(0.0, abs=1e-12)  # values in quadrature: no line fits
    phi = np.array([0.3, -1.0, 0.7, 0.2])
    real, m = real_modes((phi * np.exp(0.7j))[None, :])
    assert m[0] == pytest.approx(1.0, abs=1e-12)  # a monophase mode
    np.testing.assert_allclose(real[0] / np.abs(real[0]).max(), -phi / np.abs(phi).max(), atol=1e-12)


def test_complex_modes_in_csv(result, tmp_path):
    m = grid_sensors(result)
    rng = np.random.default_rng(3)
    z = m.shapes * np.exp(1j * (0.4 + 0.05 * rng.standard_normal(m.shapes.shape)))
    lines = ["# length_unit = m", "point,x,y,z,dx,dy,dz," + ",".join(f"m{k}" for k in range(m.n_modes)),
             "frequency_hz,,,,,,," + ",".join(repr(float(f)) for f in m.frequencies)]
    for s in range(m.n_sensors):
        lines.append(",".join([m.point_labels[s]] + [repr(float(v)) for v in m.points[s]] + ["0", "0", "1"]
                              + [f"{float(v.real)!r}{float(v.imag):+.17g}j" for v in z[:, s]]))
    (tmp_path / "c.csv").write_text("\n".join(lines) + "\n")
    back = read_csv(tmp_path / "c.csv")
    assert back.mpc is not None and np.all(back.mpc > 0.95)  # 0.05 rad phase scatter: nearly monophase
    c = correlate(result, back)
    assert c.passed and all(p.mac > 0.99 for p in c.comparison.pairs)
    assert any("MPC" in n for n in back.notes)


# --- correlation ---------------------------------------------------------------------------

def test_shift_and_noise_recovered_and_swapped_sensors_flagged(result):
    m = grid_sensors(result, noise=0.02, seed=1)
    m.frequencies = m.frequencies * np.sqrt(0.97)  # stiffness −3 %: f ∝ √E
    c = correlate(result, m)
    v = c.pair_verdicts()
    assert [p["model_mode"] for p in v] == [p["test_mode"] for p in v] == list(range(1, 7))
    assert all(p["mac"] >= 0.9 for p in v)  # issue acceptance
    for p in v:  # within 0.2 % of the known shift (issue acceptance)
        assert abs(p["df"] - (np.sqrt(0.97) - 1)) <= 0.002
    assert c.frequency_bias()["stiffness_scale"] == pytest.approx(0.97, abs=1e-9)
    assert not c.flagged_sensors()
    # swap the cables of two sensors: their CoMAC drops below the threshold, nobody else's
    i, j = 0, 13
    m.shapes[:, [i, j]] = m.shapes[:, [j, i]]
    c2 = correlate(result, m)
    flagged = [f["index"] for f in c2.flagged_sensors()]
    assert sorted(flagged) == [i, j], c2.flagged_sensors()
    assert np.all(np.delete(c2.comac, [i, j]) > CorrelationThresholds().min_comac)


def test_comac_hand_values():
    # two paired modes at three sensors, test = model: CoMAC 1 everywhere (Lieven and Ewins 1988)
    a = np.array([[1.0, 2.0, 0.5], [0.3, -1.0, 2.0]])
    np.testing.assert_allclose(comac(a, 3.0 * a), 1.0)
    # a sensor mounted the wrong way round (sign flipped in every mode): with signed products its
    # CoMAC is the lowest (the absolute-value form of Lieven and Ewins would leave it at 1)
    x = a.copy()
    x[:, 1] *= -1
    cm = comac(a, x)
    assert int(np.argmin(cm)) == 1 and cm[1] < 0.8


def test_points_off_the_model_are_named_and_left_out(result):
    m = grid_sensors(result)
    m.points[5] = [0.5, 0.5, 0.0]  # half a metre off a 240 mm plate
    c = correlate(result, m)
    off = c.off_model()
    assert [o["point"] for o in off] == [m.point_labels[5]]
    assert c.passed and np.isnan(c.comac[5])
    assert any("off the model" in w for w in c.warnings())


def test_measured_mode_without_model_partner_fails(result):
    m = grid_sensors(result)
    r = plate_result()
    keep = [0, 1, 2]
    r.frequencies, r.eigenvalues, r.shapes = r.frequencies[keep], r.eigenvalues[keep], r.shapes[keep]
    c = correlate(r, m)
    assert not c.passed and len(c.unpaired_test) == 3


# --- errors the commands report in one line ---------------------------------------------------

def _cli(*args):
    return CliRunner().invoke(app, [str(a) for a in args])


def test_one_line_errors(result, tmp_path):
    import pyuff

    res_path = save_result(result, tmp_path / "result.vtkhdf")
    m = grid_sensors(result)
    write_uff(m, tmp_path / "ok.uff")
    # a file with geometry but no modes
    sets = [s for s in read_uff_sets(tmp_path / "ok.uff") if s["type"] != 55]
    pyuff.UFF(str(tmp_path / "nomodes.uff")).write_sets(sets, mode="overwrite")
    # units missing: no dataset 164
    sets = [s for s in read_uff_sets(tmp_path / "ok.uff") if s["type"] != 164]
    pyuff.UFF(str(tmp_path / "nounits.uff")).write_sets(sets, mode="overwrite")
    # all points off the model: millimetre coordinates declared as metres
    write_csv(m, tmp_path / "mm.csv", length_unit="mm")
    (tmp_path / "wrongunit.csv").write_text((tmp_path / "mm.csv").read_text().replace("= mm", "= m"))
    # fewer points than modes
    few = MeasuredModes(m.points[:4], m.directions[:4], m.point_labels[:4], m.frequencies, m.shapes[:, :4])
    write_csv(few, tmp_path / "few.csv")
    cases = [("nomodes.uff", "holds no modes"), ("nounits.uff", "units missing"),
             ("wrongunit.csv", "every test point is off the model"), ("few.csv", "fewer points than modes")]
    for name, text in cases:
        r = _cli("correlate", res_path, tmp_path / name)
        assert r.exit_code == 15, (name, r.output)
        assert text in r.output and "Traceback" not in r.output
        assert len(r.output.strip().splitlines()) == 1, r.output
    r = _cli("plan-test", res_path, "--sensors", "3", "--out", tmp_path / "p.uff")
    assert r.exit_code == 15 and "fewer sensors than the 6 target modes" in r.output
    r = _cli("correlate", res_path, tmp_path / "ok.uff", "--max-df", "0.0001")
    assert r.exit_code == 0  # exact frequencies pass even a tiny tolerance
    m.frequencies = m.frequencies * 1.2
    write_uff(m, tmp_path / "shifted.uff")
    r = _cli("correlate", res_path, tmp_path / "shifted.uff")
    assert r.exit_code == 10 and "fail" in r.output  # 20 % off: the verdict fails, exit 10


# --- Effective Independence ---------------------------------------------------------------

def test_efi_deletion_order_by_hand():
    # Φ rows r1 = (1, 0), r2 = (0, 1), r3 = (1, 2), r4 = (0.5, 0); keep 2.
    # Step 1: Q = [[2.25, 2], [2, 5]], det 7.25, E = (5, 2.25, 6, 1.25)/7.25 → delete r4 (0.172).
    # Step 2: Q = [[2, 2], [2, 5]], det 6, E = (5, 2, 5)/6 → delete r2 (0.333). Left: r1, r3, E = 1 each.
    # (Kammer 1991: E is the diagonal of Φ(ΦᵀΦ)⁻¹Φᵀ, the smallest deleted first)
    phi = np.array([[1.0, 0.0], [0.0, 1.0], [1.0, 2.0], [0.5, 0.0]])
    r = effective_independence(phi, 2)
    assert r.deleted.tolist() == [3, 1]
    assert r.kept.tolist() == [0, 2]
    np.testing.assert_allclose(r.effective_independence, [1.0, 1.0], atol=1e-12)


def test_efi_rank_one_updates_match_recomputing():
    rng = np.random.default_rng(7)
    phi = rng.standard_normal((300, 5))
    r = effective_independence(phi, 8)
    alive = list(range(300))
    order = []
    while len(alive) > 8:  # the definition, recomputed from scratch every step
        P = phi[alive]
        E = np.einsum("ij,jk,ik->i", P, np.linalg.inv(P.T @ P), P)
        order.append(alive.pop(int(np.argmin(E))))
    assert r.deleted.tolist() == order


def test_efi_beats_random_draws_on_the_analytic_plate(result):
    modes = parse_modes(None, result)
    cand = candidates_from_model(result)
    plan = plan_test(result, 10, modes, cand)
    rng = np.random.default_rng(0)
    phi = cand.phi[:, modes]
    draws = [fisher(phi[rng.choice(len(phi), 10, replace=False)])[0] for _ in range(100)]
    assert plan.efi.log10_det > max(draws)  # issue acceptance: better than all of 100 random draws


# --- modes identified from FRFs (dataset 58) ----------------------------------------------------

def test_modes_identified_from_frfs_with_sdypy_ema(result, tmp_path):
    import pyuff

    m = grid_sensors(result)
    write_uff(m, tmp_path / "geo.uff")
    sets = [s for s in read_uff_sets(tmp_path / "geo.uff") if s["type"] != 55]
    # accelerances by modal superposition (Ewins, Modal Testing, 2000, eq. 2.77 with viscous damping):
    # stiffness −3 % (f × √0.97), 1 % damping, one reference at sensor 7, responses roving
    f = np.arange(0.0, 800.0, 1.0)
    w = 2 * np.pi * f
    wr = 2 * np.pi * m.frequencies * np.sqrt(0.97)
    ref = 7
    for s in range(m.n_sensors):
        H = -w ** 2 * sum(m.shapes[k, s] * m.shapes[k, ref] / (wr[k] ** 2 - w ** 2 + 2j * 0.01 * wr[k] * w)
                          for k in range(m.n_modes))
        sets.append(pyuff.prepare_58(binary=0, id1="synthetic FRF", func_type=4, rsp_node=int(m.point_labels[s]),
                                     rsp_dir=3, ref_node=int(m.point_labels[ref]), ref_dir=3, ord_data_type=5,
                                     num_pts=len(f), abscissa_spacing=1, abscissa_min=0.0, abscissa_inc=1.0,
                                     abscissa_spec_data_type=18, ordinate_spec_data_type=12,
                                     orddenom_spec_data_type=13, data=H, x=f))
    pyuff.UFF(str(tmp_path / "frf.uff")).write_sets(sets, mode="overwrite")
    res_path = save_result(result, tmp_path / "result.vtkhdf")
    r = _cli("correlate", res_path, tmp_path / "frf.uff")
    assert r.exit_code == 15 and "--identify" in r.output  # FRFs only: the message says what to do
    r = _cli("correlate", res_path, tmp_path / "frf.uff", "--identify", "--json")
    assert r.exit_code == 0, r.output
    d = json.loads(r.stdout)
    assert [(p["model_mode"], p["test_mode"]) for p in d["pairs"]] == [(k, k) for k in range(1, 7)]
    for p in d["pairs"]:
        # noise-free FRFs: the fit returns the frequencies to 0.1 % (common practice, no source)
        assert abs(p["df"] - (np.sqrt(0.97) - 1)) <= 1e-3
        assert p["mac"] >= 0.99 and p["mpc"] >= 0.99  # a proportionally damped system has normal modes


# --- the report -----------------------------------------------------------------------------------

def test_correlation_report_escapes_labels_and_loads_cleanly(result, tmp_path):
    import importlib.util
    from pathlib import Path

    m = grid_sensors(result, noise=0.02)
    evil = "<script>alert(1)</script>"
    m.point_labels[0] = evil
    write_csv(m, tmp_path / "m.csv")
    res_path = save_result(result, tmp_path / "result.vtkhdf")
    page = tmp_path / "corr.html"
    r = _cli("correlate", res_path, tmp_path / "m.csv", "--report", page)
    assert r.exit_code == 0, r.output
    html = page.read_text(encoding="utf-8")
    assert "<script" not in html and "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert html.count('<img src="data:image/png;base64,') == 4  # test points, MAC, auto-MAC, CoMAC
    assert "Test–analysis correlation" in html and "Content-Security-Policy" in html
    # the page loads in headless Chromium without a console message (the report tests' check)
    spec = importlib.util.spec_from_file_location(
        "_report_browser", Path(__file__).resolve().parents[1] / "plugins" / "calculix" / "test_report.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    dom, console = mod.open_in_chromium(page, tmp_path, tmp_path / "corr.png")
    assert "Test–analysis correlation" in dom
    assert console == [], console


def test_plan_from_a_file_of_candidate_points(result, tmp_path):
    # a points-only CSV (no directions, no modes): each point measured along the surface normal
    lines = ["# length_unit = mm", "point,x,y,z"]
    k = 0
    for x in np.linspace(20, 220, 9):
        for y in np.linspace(20, 140, 5):
            k += 1
            lines.append(f"C{k},{x},{y},0")
    (tmp_path / "cand.csv").write_text("\n".join(lines) + "\n")
    res_path = save_result(result, tmp_path / "result.vtkhdf")
    r = _cli("plan-test", res_path, "--sensors", "8", "--candidates", tmp_path / "cand.csv", "--out",
             tmp_path / "p.uff", "--json")
    assert r.exit_code == 0, r.output
    d = json.loads(r.stdout)
    assert len(d["sensors"]) == 8 and all(s["point"].startswith("C") for s in d["sensors"])
    assert all(abs(abs(s["direction"][2]) - 1) < 1e-12 for s in d["sensors"])  # the plate's normal
    back = read_uff(tmp_path / "p.uff")
    c = correlate(result, back)
    assert c.passed and min(p.mac for p in c.comparison.pairs) >= 1 - 1e-9


def test_nodes_from_dataset_15_and_a_translated_coordinate_system(result, tmp_path):
    import pyuff

    m = grid_sensors(result, unit="mm")
    write_uff(m, tmp_path / "a.uff")
    sets = read_uff_sets(tmp_path / "a.uff")
    g = [s for s in sets if s["type"] == 2411][0]
    # the same nodes in dataset 15 (single precision, E13.5), defined in a system 5 whose origin sits
    # at (10, 20, 0) mm: coordinates written relative to it
    cs = [s for s in sets if s["type"] == 2420][0]
    cs["CS_sys_labels"] = list(cs["CS_sys_labels"]) + [5]
    cs["CS_types"] = list(cs["CS_types"]) + [0]
    cs["CS_colors"] = list(cs["CS_colors"]) + [8]
    cs["CS_names"] = list(cs["CS_names"]) + ["shifted"]
    cs["CS_matrices"] = list(cs["CS_matrices"]) + [np.vstack([np.eye(3), [10.0, 20.0, 0.0]])]
    ints = {k: np.asarray(g[k]).astype(int) for k in ("node_nums", "disp_cs", "color")}
    d15 = pyuff.prepare_15(node_nums=ints["node_nums"], def_cs=np.full(len(ints["node_nums"]), 5),
                           disp_cs=ints["disp_cs"], color=ints["color"], x=np.asarray(g["x"]) - 10.0,
                           y=np.asarray(g["y"]) - 20.0, z=g["z"])
    rest = [s for s in sets if s["type"] not in (2411, 2420)]
    pyuff.UFF(str(tmp_path / "b.uff")).write_sets([rest[0], cs, d15] + rest[1:], mode="overwrite")
    back = read_uff(tmp_path / "b.uff")
    order = np.argsort([int(x) for x in back.point_labels], kind="stable")
    # E13.5 keeps 6 significant digits: ≤ 5e-4 mm on coordinates up to 240 mm
    np.testing.assert_allclose(back.points[order], m.points, rtol=0, atol=1e-6)
    assert correlate(result, back).passed


def test_outputs_never_overwrite_inputs(result, tmp_path):
    res_path = save_result(result, tmp_path / "result.vtkhdf")
    m = grid_sensors(result)
    write_csv(m, tmp_path / "m.csv")
    before = (tmp_path / "m.csv").read_bytes()
    r = _cli("correlate", res_path, tmp_path / "m.csv", "--csv", tmp_path / "m.csv")
    assert r.exit_code == 15 and "one of the inputs" in r.output
    assert (tmp_path / "m.csv").read_bytes() == before
    r = _cli("plan-test", res_path, "--sensors", "8", "--out", res_path)
    assert r.exit_code == 15 and load_result_ok(res_path)


def load_result_ok(path) -> bool:
    from bridge.results import load_result

    return load_result(path).n_modes == len(MN)


def test_repeated_modes_compared_as_a_cluster():
    # a square plate: modes (2,1) and (1,2) share one frequency (Navier), and a test finds any two
    # independent combinations of them, split by 0.3 %: single MACs mean little, the subspace does
    sq = plate_result(16, 16, 0.16, 0.16)
    assert sq.frequencies[1] == pytest.approx(sq.frequencies[2], rel=1e-12)
    P = np.array([[x, y, 0.0] for x in np.linspace(0.02, 0.14, 5) for y in np.linspace(0.02, 0.14, 5)])
    D = np.tile([0.0, 0.0, 1.0], (len(P), 1))
    S = model_at(sq, locate_on_model(sq, P), D)
    t = np.radians(35)
    S[1], S[2] = np.cos(t) * S[1] + np.sin(t) * S[2], -np.sin(t) * S[1] + np.cos(t) * S[2]
    f = sq.frequencies.copy()
    f[2] *= 1.003
    m = MeasuredModes(P, D, [str(i + 1) for i in range(len(P))], f, S)
    c = correlate(sq, m)
    (cl,) = c.comparison.clusters
    assert cl.a == [1, 2] and cl.b == [1, 2]
    assert max(cl.angles_deg) < 1e-6  # the same plane of shapes: principal angles 0
    assert min(p.mac for p in c.comparison.pairs if p.cluster is not None) < 0.9  # one by one they differ
    assert c.passed  # judged as a subspace, the pair passes (acos √0.9 = 18.4° limit, as compare)
