"""Start-up imports only what a command needs (a correctness check of the lazy imports; the
times themselves are measured in benchmarks/bench_startup.py, not here)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]  # the worktree: `python -c` puts the cwd first on sys.path
HEAVY = ("dask", "distributed", "pyvista", "vtk", "matplotlib", "pint", "scipy", "h5py", "meshio", "gmsh",
         "numpy", "pydantic", "rich.console", "pluggy")


def _loaded_after(code: str) -> list[str]:
    probe = (f"import sys, json\n{code}\n"
             f"sys.stdout.flush()\n"
             f"print('\\nLOADED ' + json.dumps(sorted(m for m in {HEAVY!r} if m in sys.modules)))")
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, cwd=ROOT, check=True)
    line = [x for x in out.stdout.splitlines() if x.startswith("LOADED ")][-1]
    return json.loads(line[len("LOADED "):])


def _cli(*argv: str) -> str:
    return (f"sys.argv = ['modebridge', {', '.join(repr(a) for a in argv)}]\n"
            "import bridge.cli\n"
            "try:\n    bridge.cli.main()\nexcept SystemExit:\n    pass")


def test_import_of_the_cli_is_light():
    assert _loaded_after("import bridge.cli") == []


def test_help_is_light():
    assert _loaded_after(_cli("--help")) == []
    # a command's own help builds its parameters, for which typer itself imports pydantic
    assert set(_loaded_after(_cli("run", "--help"))) <= {"pydantic"}


def test_check_imports_neither_dask_nor_the_plotting_nor_the_unit_libraries():
    loaded = _loaded_after(_cli("check", "examples/cover_panel.toml"))
    # what check needs: the model (pydantic), the mesh (gmsh, numpy), the plugin list (pluggy), the table
    assert {"pydantic", "gmsh", "numpy", "pluggy", "rich.console"} <= set(loaded)
    for absent in ("dask", "distributed", "pyvista", "vtk", "matplotlib", "pint", "scipy", "h5py", "meshio"):
        assert absent not in loaded, absent


def test_help_lists_every_command_under_its_panel():
    out = subprocess.run([sys.executable, "-m", "bridge.cli", "--help"], capture_output=True, text=True, cwd=ROOT)
    assert out.returncode == 0
    text = out.stdout
    for panel in ("Analysis:", "Studies:", "Comparison:", "Reports:", "Verification:", "Information:"):
        assert panel in text
    for cmd in ("run", "check", "converge", "vary", "compare", "report", "export", "verify", "solvers", "schema"):
        assert f"\n  {cmd} " in text, cmd
    assert text.index("Analysis:") < text.index("Studies:") < text.index("Information:")
