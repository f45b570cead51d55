"""Every model on every solver (issue 11): the demo on all three with the element each gets, and
a solver option in the model re-runs only its study task."""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.compare.results import Thresholds, compare_results
from bridge.study.executor import Task, run_tasks

pytestmark = pytest.mark.solver

ROOT = Path(__file__).resolve().parents[2]


def test_the_demo_runs_on_every_solver_and_compares(three_solvers, tmp_path):
    out = tmp_path / "demo"
    res = CliRunner().invoke(app, ["run", str(ROOT / "examples" / "cover_panel.toml"), "--solver", "all",
                                   "--out", str(out), "--json"])
    assert res.exit_code == 0, res.output
    runs = {r["solver"]: r for r in json.loads(res.stdout)["runs"]}
    assert set(runs) == set(three_solvers)
    # the summary says which element each solver got and why
    assert runs["calculix"]["element"]["family"] == "quad8" and runs["calculix"]["element"]["element_type"] == "S8R"
    for name in ("kratos", "opensees"):
        el = runs[name]["element"]
        assert (el["requested"], el["family"], el["size_factor"], el["how"]) == ("quad8", "quad4", 0.5, "substitute")
        assert "has no 8-node shell" in el["reason"]
        assert runs[name]["mesh"]["elements"] == 4 * runs["calculix"]["mesh"]["elements"]
        assert (out / name / "mesh.vtu").is_file()
    # compare with the default thresholds (MAC ≥ 0.9, |Δf| ≤ 1 %; common practice, no source)
    for name in ("kratos", "opensees"):
        cmp = CliRunner().invoke(app, ["compare", str(out / "calculix"), str(out / name)])
        assert cmp.exit_code == 0, cmp.output
        assert "verdict: pass" in cmp.output
    # the terminal says it too
    text = CliRunner().invoke(app, ["run", str(ROOT / "examples" / "cover_panel.toml"), "--solver", "opensees",
                                    "--out", str(tmp_path / "one")])
    assert text.exit_code == 0, text.output
    assert "element: ShellMITC4 — quad4 at half the element size instead of quad8: OpenSees has no 8-node shell" \
        in text.output


def test_a_changed_solver_option_reruns_only_its_task(three_solvers, plate, tmp_path):
    base = tomllib.loads(plate("quad4", (6, 6), "clamped", modes=3))
    study = tmp_path / "study"

    def tasks(options: dict | None):
        raw = dict(base, **({"solver_options": options} if options else {}))
        return [Task(f"{s}", raw, str(tmp_path), s) for s in ("calculix", "opensees")]

    states = lambda outs: {o.task.solver: o.state for o in outs}  # noqa: E731
    first = run_tasks(tasks(None), study, workers=1)
    assert states(first) == {"calculix": "done", "opensees": "done"}, [o.error for o in first]
    assert first[1].summary["element_type"] == "ShellMITC4"
    assert states(run_tasks(tasks(None), study, workers=1)) == {"calculix": "cached", "opensees": "cached"}
    # the default given explicitly is the same run; another solver's option does not touch these
    same = run_tasks(tasks({"opensees": {"quad_shell": "ShellMITC4"}, "kratos": {"shell_theory": "thick"}}),
                     study, workers=1)
    assert states(same) == {"calculix": "cached", "opensees": "cached"}
    changed = run_tasks(tasks({"opensees": {"quad_shell": "ShellDKGQ"}}), study, workers=1)
    assert states(changed) == {"calculix": "cached", "opensees": "done"}
    assert changed[1].summary["element_type"] == "ShellDKGQ"
    assert changed[1].summary["solver_options"] == {"quad_shell": "ShellDKGQ", "tri_shell": "ASDShellT3",
                                                    "eigen_solver": "genBandArpack", "linear_solver": "SuperLU",
                                                    "threads": 0}
    assert changed[1].folder != first[1].folder
    assert states(run_tasks(tasks({"opensees": {"quad_shell": "ShellDKGQ"}}), study, workers=1))["opensees"] == "cached"
    # a thread count does not change the result: not in the key, the run is reused
    threads = run_tasks(tasks({"opensees": {"quad_shell": "ShellDKGQ", "threads": 2}, "calculix": {"threads": 2}}),
                        study, workers=1)
    assert states(threads) == {"calculix": "cached", "opensees": "cached"}


def test_a_pinned_family_wins(three_solvers, plate, write_model, tmp_path):
    from bridge.pipeline import run_model

    path = write_model(plate("quad8", (8, 8), "clamped", modes=4, extra='solver_family = { kratos = "tri3" }'))
    _, outs = run_model(path, tmp_path / "pin", solvers=["kratos"])
    (o,) = outs
    assert o.ok, o.error
    assert o.summary["element"]["how"] == "pinned" and o.summary["element"]["family"] == "tri3"
    assert o.summary["element_type"] == "ShellThinElementCorotational3D3N"
    _, (c,) = run_model(path, tmp_path / "ref", solvers=["calculix"])
    # a coarse tri3 mesh against S8R: the same part, paired by shape (MAC ≥ 0.9; common practice)
    cmp = compare_results(c.result, o.result, "calculix", "kratos", Thresholds(min_mac=0.9, max_df=0.10))
    assert cmp.mapped and all(p["mac"] >= 0.9 for p in cmp.pair_verdicts())


_VARY_ALL = """
model = "plate.toml"

[[variant]]
name = "thicker"
set = { section = { thickness = "2 mm" } }

[[variant]]
name = "coarse_quad"
[variant.set]
mesh = { solver_family = { opensees = "quad4" } }
"""


def test_vary_on_every_solver_compares_each_variant_across_them(three_solvers, plate, write_model, tmp_path):
    # the demo panel's plan, sheet and mesh (a thin sheet: Kratos's thin shells and S8R agree there;
    # on thick plates they differ by transverse shear, e.g. 1.9 % at t/b = 3/80, measured)
    write_model(plate("quad8", (24, 16), "simply_supported", modes=4, length="240 mm", width="160 mm",
                      thickness="1.5 mm"), "plate.toml")
    study = write_model(_VARY_ALL, "variants.toml")
    res = CliRunner().invoke(app, ["vary", str(study), "--solver", "all", "--out", str(tmp_path / "vary"),
                                   "--json", "-j", "1"])
    data = json.loads(res.stdout)
    assert [s["solver"] for s in data["solvers"]] == ["calculix", "kratos", "opensees"]
    assert data["solver"] == "calculix" and data["baseline"] == data["solvers"][0]["baseline"]
    for s in data["solvers"]:
        assert [v["name"] for v in s["variants"]] == ["thicker", "coarse_quad"]
        thick = s["variants"][0]
        # Kirchhoff plate theory: f ∝ t at the same E, ρ, ν and plan (Leissa 1969, NASA SP-160,
        # eq. 1.5 from memory): 2 mm / 1.5 mm = 4/3 for every paired mode, within 1 % (transverse
        # shear and the mesh; common practice, no source)
        for p in thick["pairs"]:
            assert p["f_variant_hz"] / p["f_baseline_hz"] == pytest.approx(4 / 3, rel=0.01)
    across = {(a["variant"], a["solver"]): a for a in data["across_solvers"]}
    assert set(across) == {(v, s) for v in ("baseline", "thicker", "coarse_quad") for s in ("kratos", "opensees")}
    # the same model on each solver, each with its best element: within compare's default
    # thresholds (MAC ≥ 0.9, |Δf| ≤ 1 %; common practice, no source)
    for key in [("baseline", "kratos"), ("baseline", "opensees"), ("thicker", "kratos"), ("thicker", "opensees"),
                ("coarse_quad", "kratos")]:
        a = across[key]
        assert a["passed"], (key, a)
        assert all(abs(p["df"]) <= 0.01 and p["mac"] >= 0.9 for p in a["pairs"])
    # the other direction: OpenSees pinned to quad4 shells at the quad8 size (no halving: its error
    # falls as h², S8R's faster) is too coarse; the verdict says so with the figure, and vary exits 10
    bad = across[("coarse_quad", "opensees")]
    assert not bad["passed"] and max(abs(p["df"]) for p in bad["pairs"]) > 0.01, bad
    assert res.exit_code == 10, res.output
