"""Element choice per solver (model family, plugin substitute, pinned family) and solver options
(declared by the plugin, validated like the model, every one with a value, in the cache key)."""

from __future__ import annotations

import json

import pytest
from typer.testing import CliRunner

from bridge.cli import app
from bridge.errors import CapabilityError, ExitCode, ModelError
from bridge.model import load_model
from bridge.pipeline import check_capabilities, prepare
from bridge.selection import choose_element, model_for, options_key, solver_options
from bridge.solver import Capabilities, SolverOption, Substitute
from bridge.study.executor import Task, task_key


class _Adapter:
    name = "fake"
    label = "a fake solver"
    capabilities = Capabilities(
        families=frozenset({"quad4", "tri3", "tet10", "hex20"}), supports=frozenset({"clamped", "simply_supported"}),
        substitutes={"quad8": Substitute("quad4", 0.5, "no 8-node shell"), "hex8": Substitute("hex20", 1.0, "locks")},
        options=(SolverOption("formulation", str, "a", "which one", choices=("a", "b")),
                 SolverOption("tolerance", float, 1e-8, "eigen tolerance", minimum=0.0, maximum=1e-3),
                 SolverOption("threads", int, 1, "threads", minimum=1, affects_result=False)))


def test_model_family_substitute_and_pin(write_model, plate):
    m = load_model(write_model(plate("quad8", (6, 4), "simply_supported")))
    c = choose_element(m, _Adapter())
    assert (c.family, c.size_factor, c.how) == ("quad4", 0.5, "substitute")
    assert c.reason == "quad4 at half the element size instead of quad8: no 8-node shell"
    mm = model_for(m, c)
    assert mm.mesh.family == "quad4" and mm.mesh.divisions == [12, 8]  # twice the divisions = half the size
    assert mm.physics_hash() == m.physics_hash()  # still the same part: compare accepts the pair
    assert prepare(mm).mesh.n_elements == 4 * prepare(m).mesh.n_elements
    m4 = load_model(write_model(plate("quad4", (6, 4), "clamped")))
    assert choose_element(m4, _Adapter()).how == "model" and model_for(m4, choose_element(m4, _Adapter())) is m4
    pinned = load_model(write_model(plate("quad8", (6, 4), "clamped", extra='solver_family = { fake = "tri3" }')))
    c = choose_element(pinned, _Adapter())
    assert (c.family, c.how) == ("tri3", "pinned")
    with pytest.raises(CapabilityError, match="has no 'tri6' element; it offers .*, and no substitute for 'tri6'"):
        choose_element(load_model(write_model(plate("tri6", (6, 4), "clamped"))), _Adapter())
    with pytest.raises(ModelError, match="mesh.solver_family.fake: 'tet10' is a solid family"):
        load_model(write_model(plate("quad8", (6, 4), "clamped", extra='solver_family = { fake = "tet10" }')))


def test_options_are_validated_and_filled(write_model, plate):
    text = plate("quad4", (2, 2), "clamped")
    path = write_model(text + '\n[solver_options.fake]\nformulation = "b"\n')
    assert solver_options(load_model(path), _Adapter(), path) == {"formulation": "b", "tolerance": 1e-8, "threads": 1}
    for bad, msg in [('formulation = "c"', "solver_options.fake.formulation: 'c' is not accepted; accepted: a, b"),
                     ("formulation = 3", "solver_options.fake.formulation: must be a str, got 3; accepted: a, b"),
                     ("tolerance = 1.0", "solver_options.fake.tolerance: must be at most 0.001, got 1.0"),
                     ("tolerance = true", "solver_options.fake.tolerance: must be a float, got True"),
                     ("shell = 1", "solver_options.fake.shell: solver 'fake' has no option 'shell'; accepted: "
                                   "formulation, tolerance, threads")]:
        path = write_model(text + f"\n[solver_options.fake]\n{bad}\n", "bad.toml")
        with pytest.raises(ModelError) as exc:
            check_capabilities(load_model(path), _Adapter(), path)
        assert str(exc.value) == f"{path}: {msg}"
    with pytest.raises(ModelError, match="solver_options.fake"):
        load_model(write_model(text + '\n[solver_options.fake]\n"Bad Key" = 1\n', "bad2.toml"))


def test_cache_key_takes_this_solvers_result_options_only(plate):
    import tomllib

    base = tomllib.loads(plate("quad4", (2, 2), "clamped"))

    def key(extra: dict) -> str:
        d = dict(base, **({"solver_options": extra} if extra else {}))
        return task_key(Task("t", d, ".", "fake"), "1.0", _Adapter())

    k0 = key({})
    assert key({"fake": {"formulation": "a"}}) == k0  # the default given explicitly: the same run
    assert key({"fake": {"threads": 4}}) == k0  # declared not to change the result
    assert key({"other": {"anything": 1}}) == k0  # another solver's options
    assert key({"fake": {"formulation": "b"}}) != k0
    assert options_key(_Adapter(), {"formulation": "b", "tolerance": 1e-8, "threads": 2}) == \
        {"formulation": "b", "tolerance": 1e-8}


def test_bad_option_is_one_line_and_exit_3(write_model, plate, tmp_path):
    path = write_model(plate("quad4", (2, 2), "clamped") + '\n[solver_options.opensees]\nquad_shell = "S4R"\n')
    res = CliRunner().invoke(app, ["run", str(path), "--solver", "opensees", "--out", str(tmp_path / "o")])
    assert res.exit_code == ExitCode.MODEL == ModelError.exit_code
    assert "solver_options.opensees.quad_shell: 'S4R' is not accepted; accepted: ShellMITC4, ShellDKGQ, ASDShellQ4" \
        in res.output and "Traceback" not in res.output
    assert not (tmp_path / "o" / "opensees" / "result.vtkhdf").exists()


def test_solvers_lists_options_and_substitutes():
    res = CliRunner().invoke(app, ["solvers", "--json"])
    assert res.exit_code == 0, res.output
    rows = {r["name"]: r["capabilities"] for r in json.loads(res.stdout)}
    if "opensees" in rows:
        opts = {o["name"]: o for o in rows["opensees"]["options"]}
        assert opts["quad_shell"]["choices"] == ["ShellMITC4", "ShellDKGQ", "ASDShellQ4"]
        assert opts["quad_shell"]["default"] == "ShellMITC4" and opts["quad_shell"]["help"]
        assert rows["opensees"]["substitutes"]["quad8"] == {"family": "quad4", "size_factor": 0.5,
                                                            "reason": "OpenSees has no 8-node shell"}
    assert rows["calculix"]["substitutes"]["tri3"]["family"] == "tri6"


def test_bundled_threads_stay_out_of_the_cache_key_and_eigen_solvers_in(plate):
    """Every bundled plugin declares threads (no effect on the result: not keyed); an eigen-solver
    choice changes the run's key."""
    import tomllib

    from bridge.plugins import get_plugin_manager, get_solvers

    adapters = get_solvers(get_plugin_manager())
    base = tomllib.loads(plate("quad4", (2, 2), "clamped"))
    other = {"kratos": "eigen_eigensystem", "opensees": "fullGenLapack"}
    for name in ("calculix", "kratos", "opensees"):
        if name not in adapters:
            continue
        a = adapters[name]

        def key(opts):
            return task_key(Task("t", dict(base, solver_options={name: opts}), ".", name), "v", a)

        decl = {o.name: o for o in a.capabilities.options}
        assert decl["threads"].default == 0 and not decl["threads"].affects_result
        assert key({"threads": 4}) == key({})
        if name in other:
            assert key({"eigen_solver": other[name]}) != key({})
