"""Three independent solvers on one model: agreement in frequency and shape (issue acceptance)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.compare.results import Thresholds, compare_results
from bridge.pipeline import run_model
from bridge.results import load_result

pytestmark = pytest.mark.solver


def test_shell_models_of_the_clamped_plate_in_three_solvers(three_solvers, write_model, plate, tmp_path):
    # CalculiX with quad8 (S8R) 30 × 30; Kratos and OpenSees with quad4 40 × 40: different meshes
    ccx_model = write_model(plate("quad8", (30, 30), "clamped", modes=6), "q8.toml")
    q4_model = write_model(plate("quad4", (40, 40), "clamped", modes=6), "q4.toml")
    _, (c,) = run_model(ccx_model, tmp_path / "q8", solvers=["calculix"])
    _, outs = run_model(q4_model, tmp_path / "q4", solvers=["kratos", "opensees"])
    assert c.ok and all(o.ok for o in outs), [str(o.error) for o in outs]
    results = {"calculix": c.result, **{o.solver: o.result for o in outs}}
    f1 = np.array([r.frequencies[0] for r in results.values()])
    # within 1 % of 1793 Hz (Leissa 1969, λ² = 35.99, from memory) and of each other
    np.testing.assert_allclose(f1, 1793.0, rtol=0.01)
    assert np.ptp(f1) / f1.mean() < 0.01
    ref = results["calculix"]
    for name in ("kratos", "opensees"):
        cmp = compare_results(ref, results[name], "calculix", name, Thresholds(min_mac=0.95, max_df=0.01))
        assert cmp.mapped
        # paired MAC ≥ 0.95 after mapping, |Δf| ≤ 1 % (issue acceptance; common practice, no source)
        assert cmp.passed, cmp.pair_verdicts()
        (cl, *_) = cmp.comparison.clusters
        assert cl.a == [1, 2] and cl.b == [1, 2]
        assert max(cl.angles_deg) <= 5.0  # the repeated pair as one cluster, principal angles ≤ 5°


def test_one_shared_tet10_mesh_three_solvers_cli(three_solvers, write_model, tmp_path):
    text = """
    name = "clamped plate tet10"
    [geometry]
    kind = "block"
    length = "100 mm"
    width = "100 mm"
    height = "2 mm"
    [materials.steel]
    youngs_modulus = "210 GPa"
    poisson_ratio = 0.3
    density = "7850 kg/m^3"
    [section]
    kind = "solid"
    material = "steel"
    [regions.rim]
    select = "sides"
    sides = ["xmin", "xmax", "ymin", "ymax"]
    [[supports]]
    region = "rim"
    kind = "clamped"
    [analysis]
    modes = 6
    [mesh]
    family = "tet10"
    size = "7 mm"
    """
    path = write_model(text)
    out = tmp_path / "run"
    runner = CliRunner()
    res = runner.invoke(app, ["run", str(path), "--out", str(out), "--json",
                              "--solver", "calculix", "--solver", "kratos", "--solver", "opensees"])
    assert res.exit_code == 0, res.output
    runs = json.loads(res.stdout)["runs"]
    assert [r["solver"] for r in runs] == three_solvers
    ref = load_result(out / "calculix")
    for name in ("kratos", "opensees"):
        other = load_result(out / name)
        np.testing.assert_array_equal(other.points, ref.points)  # one mesh for all
        # independent codes on an identical mesh and element agree to about 1e-5
        # (measured with this solver on a machine of this kind); the issue asks 0.05 %
        np.testing.assert_allclose(other.frequencies, ref.frequencies, rtol=5e-4)
        cmp = compare_results(ref, other, "calculix", name)
        assert not cmp.mapped
        for p in cmp.comparison.pairs:
            if p.cluster is None:
                assert p.mac >= 0.99  # issue acceptance
        for cl in cmp.comparison.clusters:
            assert max(cl.angles_deg) <= 5.0
    # the compare command over the three result folders passes with the default thresholds
    res = runner.invoke(app, ["compare", str(out / "calculix"), str(out / "kratos"), str(out / "opensees")])
    assert res.exit_code == 0, res.output


def test_verify_passes_on_kratos_and_opensees(three_solvers, tmp_path):
    # every built-in case against its published targets, with the tolerances stated in the cases
    res = CliRunner().invoke(app, ["verify", "--solver", "kratos", "--solver", "opensees",
                                   "--out", str(tmp_path / "v"), "--json"])
    data = json.loads(res.stdout)
    failed = [(c["case"], c["solver"], c["error"], c["modes"]) for c in data["cases"]
              if not c["passed"] and not c["note"].startswith("skipped")]
    assert res.exit_code == 0 and not failed, failed
    ran = {(c["case"], c["solver"]) for c in data["cases"] if c["modes"]}
    from bridge.verify import load_cases

    # every built-in case × 2 solvers; OpenSees takes no couplings on solids: that case is skipped
    # with the reason (Kratos runs them all)
    skipped = {(c["case"], c["solver"]) for c in data["cases"] if c["note"].startswith("skipped")}
    assert skipped == {("tip_inertia", "opensees")}
    assert len(ran) == 2 * len(load_cases()) - len(skipped)
