"""Bad input gets one clear line and a non-zero exit, never a traceback, and never leaves a
partial result that looks complete.

Exit codes are compared with the ``exit_code`` of the error class (source: bridge/errors.py).
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import time
from pathlib import Path

import pytest
from typer.testing import CliRunner

from bridge import hookimpl
from bridge.cli import INTERNAL, app
from bridge.errors import (
    BridgeError,
    CapabilityError,
    ModelError,
    PluginError,
    ResultParseError,
    SolverNotFoundError,
    SolverRunError,
    SolverTimeoutError,
    UnitError,
)
from bridge.io import inside
from bridge.model import load_model
from bridge.pipeline import make_job, run_model
from bridge.plugins import get_plugin_manager
from bridge.solver import Capabilities, RunRecord
from modebridge_calculix import deck as ccx_deck
from modebridge_calculix import runner as ccx_runner
from modebridge_calculix.adapter import CalculixAdapter

runner = CliRunner()
_ANSI = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")


def error_line(result, exit_code: int | None = None) -> str:
    """The single ``error:`` line on stderr of a failed command, after checking the contract."""
    assert result.exit_code != 0, result.output
    if exit_code is not None:
        assert result.exit_code == exit_code, result.output
    # typer 0.29 / click 8.2+: stderr is captured apart from stdout; only typer.Exit escaped
    assert isinstance(result.exception, SystemExit), repr(result.exception)
    for text in (result.output, result.stdout, result.stderr):
        assert "Traceback" not in text
    lines = _ANSI.sub("", result.stderr).splitlines()
    assert len(lines) == 1, result.stderr
    line = lines[0]
    assert line.startswith("error: "), line
    assert "internal error" not in line
    return line


def _small_plate(plate, **kw) -> str:
    """A 2 × 2 quad4 plate: validation fails before meshing, so the size does not matter."""
    kw.setdefault("modes", 2)
    return plate("quad4", (2, 2), "clamped", **kw)


# --- 1. malformed TOML ------------------------------------------------------------------

@pytest.mark.parametrize("text, line", [
    ('name = "x"\n[geometry\nkind = "plate"\n', 2),           # unclosed table header
    ('name = "x"\nname = "y"\n', 2),                           # duplicate key
    ('name = "x"\n\n\nthickness = 2 mm\n', 4),                  # bare word after a number
    ('a = 1\nname = "x\n', 2),                                  # unterminated string
    ('[a]\nb = 1\n[a]\nc = 2\n', 3),                            # table declared twice
])
@pytest.mark.parametrize("cmd", ["check", "run"])
def test_malformed_toml_names_file_and_line(cmd, text, line, write_model, tmp_path):
    path = write_model(text)
    out = tmp_path / "out"
    result = runner.invoke(app, [cmd, str(path)] + (["--out", str(out)] if cmd == "run" else []))
    msg = error_line(result, ModelError.exit_code)
    assert str(path) in msg and "malformed TOML" in msg
    # the line number is the position of the defect in the text above (counted by hand)
    assert f"line {line}," in msg
    assert not out.exists()  # nothing written for a model that does not load


# --- 2-8. validation: one line naming the file, the field and what is accepted --------------

_VALIDATION = {
    # case: (replace this, with this, field path, what the message must say is accepted, error class)
    "unknown key": ('poisson_ratio = 0.3', 'poisson_ratio = 0.3\npoisson = 0.3',
                    "materials.steel.poisson", "unknown key; accepted here: youngs_modulus", ModelError),
    "missing unit": ('thickness = "2 mm"', 'thickness = "2"',
                     "section.thickness", 'has no unit; a length needs one, e.g. "2 mm"', UnitError),
    "wrong dimension": ('thickness = "2 mm"', 'thickness = "2 kg"',
                        "section.thickness", 'not a length; e.g. "2 mm"', UnitError),
    "bare number": ('thickness = "2 mm"', 'thickness = 2',
                    "section.thickness", 'the number 2 has no unit', UnitError),
    "undefined material": ('material = "steel"', 'material = "alu"',
                           "section.material", "material 'alu' is not defined; defined: steel", ModelError),
    "zero thickness": ('thickness = "2 mm"', 'thickness = "0 mm"',
                       "section.thickness", "must be greater than 0", ModelError),
    "negative thickness": ('thickness = "2 mm"', 'thickness = "-2 mm"',
                           "section.thickness", "must be greater than 0", ModelError),
    "unknown region": ('region = "rim"', 'region = "edge"',
                       "supports[0].region", "region 'edge' is not defined; defined: rim", ModelError),
}


@pytest.mark.parametrize("case", list(_VALIDATION))
@pytest.mark.parametrize("cmd", ["check", "run"])
def test_validation_error_is_one_line(cmd, case, plate, write_model, tmp_path):
    old, new, field, accepted, _ = _VALIDATION[case]
    text = _small_plate(plate)
    assert old in text
    path = write_model(text.replace(old, new, 1))
    out = tmp_path / "out"
    result = runner.invoke(app, [cmd, str(path)] + (["--out", str(out)] if cmd == "run" else []))
    msg = error_line(result, ModelError.exit_code)
    assert msg.startswith(f"error: {path}: {field}: ")  # the file, then the field path
    assert accepted in msg
    assert not out.exists()


@pytest.mark.parametrize("case", list(_VALIDATION))
def test_validation_error_class(case, plate, write_model):
    old, new, field, _, cls = _VALIDATION[case]
    path = write_model(_small_plate(plate).replace(old, new, 1))
    with pytest.raises(cls) as info:
        load_model(path)
    assert type(info.value) is cls
    assert info.value.field == field and info.value.source == str(path)


def test_unknown_key_lists_accepted_keys(plate, write_model):
    path = write_model(_small_plate(plate).replace("poisson_ratio = 0.3", "poisson_ratio = 0.3\npoisson = 0.3", 1))
    with pytest.raises(ModelError) as info:
        load_model(path)
    assert str(info.value).endswith("materials.steel.poisson: unknown key; "
                                    "accepted here: youngs_modulus, poisson_ratio, density")


@pytest.mark.parametrize("old, new, field, keys", [
    ('kind = "shell"', 'kind = "shell"\nfoo = 1', "section.foo", "kind, material, thickness"),
    ('kind = "clamped"', 'kind = "clamped"\nfoo = 1', "supports[0].foo", "region, point, kind, dofs, normal"),
    ('kind = "plate"', 'kind = "plate"\nfoo = 1', "geometry.foo", "kind, length, width, origin, cutouts, patches"),
    pytest.param('select = "sides"\nsides = ["xmin", "xmax", "ymin", "ymax"]',
                 'select = "box"\nmin = ["0 mm", "0 mm", "0 mm"]\nmax = ["1 mm", "1 mm", "0 mm"]\nfoo = 1',
                 "regions.rim.foo", "select, min, max, entity"),
    pytest.param('select = "sides"\nsides = ["xmin", "xmax", "ymin", "ymax"]',
                 'select = "plane"\naxis = "x"\nat = "0 mm"\nfoo = 1',
                 "regions.rim.foo", "select, axis, at, entity"),
])
def test_unknown_key_lists_the_keys_of_its_table(old, new, field, keys, plate, write_model):
    text = _small_plate(plate)
    assert old in text
    path = write_model(text.replace(old, new, 1))
    with pytest.raises(ModelError) as info:
        load_model(path)
    assert type(info.value) is ModelError  # not a UnitError
    assert str(info.value) == f"{path}: {field}: unknown key; accepted here: {keys}"


@pytest.mark.parametrize("make, detail", [
    (lambda d: d / "missing.toml", "file not found"),
    (lambda d: d, "cannot read"),                                   # a directory
    (lambda d: (d / "latin1.toml", (d / "latin1.toml").write_bytes(b'name = "caf\xe9"\n'))[0],
     "not UTF-8"),
])
def test_unreadable_model_file(make, detail, tmp_path):
    path = make(tmp_path)
    msg = error_line(runner.invoke(app, ["check", str(path)]), ModelError.exit_code)
    assert str(path) in msg and detail in msg


def test_unknown_solver_lists_installed(plate, write_model, tmp_path):
    path = write_model(_small_plate(plate))
    result = runner.invoke(app, ["run", str(path), "--solver", "nosuch", "--out", str(tmp_path / "o")])
    msg = error_line(result, PluginError.exit_code)
    assert "unknown solver 'nosuch'; installed:" in msg and "calculix" in msg
    assert not (tmp_path / "o").exists()


# --- 9. element family the solver lacks ------------------------------------------------------

class _FakeAdapter:
    """A solver that offers hex20 only and records every call the pipeline makes."""

    name = "fake"
    label = "Fake solver"
    capabilities = Capabilities(families=frozenset({"hex20"}), supports=frozenset({"clamped"}))

    def __init__(self, exe: str | None = "/bin/true"):
        self.exe = exe
        self.calls: list[str] = []

    def locate(self):
        return self.exe

    def version(self):
        return "0"

    def write_deck(self, job, workdir):
        self.calls.append("write_deck")
        p = Path(workdir) / "fake.inp"
        p.write_text("deck\n")
        return p

    def run(self, job, workdir):
        self.calls.append("run")
        raise SolverRunError("the fake solver does not solve")

    def read_results(self, job, workdir, record):
        self.calls.append("read_results")
        raise ResultParseError("the fake solver has no results")


class _FakePlugin:
    def __init__(self, adapter):
        self.adapter = adapter

    @hookimpl
    def bridge_register_solvers(self):
        return [self.adapter]


def _fake_pm(adapter, entrypoints: bool = False):
    return get_plugin_manager(entrypoints=entrypoints, extra=[_FakePlugin(adapter)])


def _solver_files(out: Path, name: str) -> list[Path]:
    folder = out / name
    return sorted(folder.rglob("*")) if folder.exists() else []


def test_missing_family_refused_before_any_deck(plate, write_model, tmp_path):
    adapter = _FakeAdapter()
    path = write_model(_small_plate(plate, extra='[run]\nsolvers = ["fake"]\n'))
    out = tmp_path / "out"
    with pytest.raises(CapabilityError) as info:
        run_model(path, out, pm=_fake_pm(adapter))
    assert "mesh.family" in str(info.value) and "'quad4'" in str(info.value)
    assert "it offers hex20" in str(info.value)
    assert adapter.calls == []
    assert _solver_files(out, "fake") == []


def test_missing_family_through_cli(plate, write_model, tmp_path, monkeypatch):
    adapter = _FakeAdapter()
    pm = _fake_pm(adapter)
    monkeypatch.setattr("bridge.pipeline.get_plugin_manager", lambda *a, **k: pm)
    path = write_model(_small_plate(plate, extra='[run]\nsolvers = ["fake"]\n'))
    out = tmp_path / "out"
    msg = error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]), CapabilityError.exit_code)
    assert "mesh.family: solver 'fake' has no 'quad4' element; it offers hex20" in msg
    assert adapter.calls == []
    assert _solver_files(out, "fake") == []


class _BrokenPlugin:
    """A plugin whose module is installed but whose adapter does not import."""

    @hookimpl
    def bridge_register_solvers(self):
        from modebridge_no_such_module import adapter  # noqa: F401  (raises ImportError)

        return []


def _pm_with_broken_plugin():
    import modebridge_calculix

    pm = get_plugin_manager(entrypoints=False, extra=[modebridge_calculix])
    pm.register(_BrokenPlugin(), name="broken")
    return pm


def test_broken_plugin_leaves_the_others_working(plate, write_model, monkeypatch):
    pm = _pm_with_broken_plugin()
    monkeypatch.setattr("bridge.plugins.get_plugin_manager", lambda *a, **k: pm)
    result = runner.invoke(app, ["check", str(write_model(_small_plate(plate)))])
    assert result.exit_code == 0, result.output
    assert "solver calculix: ok" in result.stdout and "Traceback" not in result.output


def test_asking_for_a_broken_plugin_is_one_line(plate, write_model, tmp_path, monkeypatch):
    pm = _pm_with_broken_plugin()
    monkeypatch.setattr("bridge.pipeline.get_plugin_manager", lambda *a, **k: pm)
    path = write_model(_small_plate(plate))
    out = tmp_path / "out"
    msg = error_line(runner.invoke(app, ["run", str(path), "--solver", "broken", "--out", str(out)]),
                     PluginError.exit_code)
    assert "solver plugin 'broken' is installed but fails to load" in msg
    assert "modebridge_no_such_module" in msg
    assert not out.exists()


# --- 10. solver executable missing -----------------------------------------------------------

@pytest.mark.parametrize("how", ["empty PATH", "which returns None", "MODEBRIDGE_CCX wrong"])
def test_missing_executable_names_install_command(how, plate, write_model, tmp_path, monkeypatch):
    monkeypatch.delenv("MODEBRIDGE_CCX", raising=False)
    if how == "empty PATH":
        (tmp_path / "empty").mkdir()
        monkeypatch.setenv("PATH", str(tmp_path / "empty"))
    elif how == "which returns None":
        monkeypatch.setattr(shutil, "which", lambda *a, **k: None)
    else:
        monkeypatch.setenv("MODEBRIDGE_CCX", str(tmp_path / "no" / "ccx"))
    path = write_model(_small_plate(plate))
    out = tmp_path / "out"
    msg = error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]),
                     SolverNotFoundError.exit_code)
    assert "calculix" in msg and "apt-get install -y calculix-ccx" in msg
    assert not out.exists()


def test_runner_without_executable(tmp_path, monkeypatch):
    monkeypatch.delenv("MODEBRIDGE_CCX", raising=False)
    monkeypatch.setenv("PATH", str(tmp_path))
    with pytest.raises(SolverNotFoundError, match="apt-get install -y calculix-ccx"):
        ccx_runner.run_ccx(tmp_path)
    assert not (tmp_path / "job.log").exists()


def test_runner_with_wrong_modebridge_ccx(tmp_path, monkeypatch):
    monkeypatch.setenv("MODEBRIDGE_CCX", str(tmp_path / "nowhere" / "ccx"))
    with pytest.raises(SolverNotFoundError, match="MODEBRIDGE_CCX=.* is not an executable file"):
        ccx_runner.run_ccx(tmp_path)


def test_runner_with_unstartable_executable(tmp_path, monkeypatch):
    # executable bit set but no valid program: exec fails with ENOEXEC
    fake = tmp_path / "ccx"
    fake.write_bytes(b"\x00\x01\x02 not a program\n")
    fake.chmod(0o755)
    monkeypatch.setenv("MODEBRIDGE_CCX", str(fake))
    with pytest.raises(SolverNotFoundError, match="cannot be started"):
        ccx_runner.run_ccx(tmp_path)


# --- 11. a solver that exits 0 with a skipped card -----------------------------------------

# one S4 element, two corners clamped: but the *BOUNDRY card is misspelt, so CalculiX skips it
_TINY_DECK = """\
*NODE, NSET=NALL
1, 0, 0, 0
2, 10, 0, 0
3, 10, 10, 0
4, 0, 10, 0
*ELEMENT, TYPE=S4, ELSET=EALL
1, 1, 2, 3, 4
*MATERIAL, NAME=MAT1
*ELASTIC
210000, 0.3
*DENSITY
7.85e-9
*SHELL SECTION, ELSET=EALL, MATERIAL=MAT1
2
*BOUNDRY
1, 1, 6
2, 1, 6
*STEP
*FREQUENCY
2
*NODE FILE, OUTPUT=2D
U
*END STEP
"""


@pytest.mark.solver
def test_runner_rejects_skipped_card(ccx, tmp_path):
    (tmp_path / "job.inp").write_text(_TINY_DECK)
    with pytest.raises(SolverRunError) as info:
        ccx_runner.run_ccx(tmp_path, "job", timeout=60)
    exc = info.value
    # ccx exits 0 on a skipped card (measured with this solver on a machine of this kind "Silent failures")
    assert exc.returncode == 0
    assert "BOUNDRY" in str(exc) and "\n" not in str(exc)
    assert exc.log_path == str(tmp_path / "job.log")


def test_scan_log_reads_ccx_220_split_word():
    # verbatim ccx 2.20 output: the word is printed split, "inter    preted"
    log = (" *WARNING in calinput. Card image cannot be inter    preted:\n"
           " *WARNING reading the input file. Card image:\n"
           "          *BOUNDRY\n")
    errors, warnings = ccx_runner.scan_log(log)
    assert errors and "*BOUNDRY" in errors[0]


def _misspell_boundary(monkeypatch):
    original = ccx_deck.deck_text

    def misspelt(job):
        text = original(job)
        assert "*BOUNDARY\n" in text
        return text.replace("*BOUNDARY\n", "*BOUNDRY\n")

    monkeypatch.setattr(ccx_deck, "deck_text", misspelt)


def _assert_failed_folder(folder: Path, error_cls: type) -> None:
    assert not (folder / "result.vtkhdf").exists()
    assert not (folder / "summary.json").exists()
    assert not list(folder.glob("*.part*"))  # no half-written result either
    assert (folder / "error.txt").read_text().startswith(f"{error_cls.__name__}: ")


@pytest.mark.solver
def test_pipeline_rejects_skipped_card(ccx, plate, write_model, tmp_path, monkeypatch):
    _misspell_boundary(monkeypatch)
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    out = tmp_path / "out"
    msg = error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]), SolverRunError.exit_code)
    assert msg.startswith("error: calculix: CalculiX reported:") and "*BOUNDRY" in msg
    _assert_failed_folder(out / "calculix", SolverRunError)


@pytest.mark.solver
@pytest.mark.parametrize("folder_name", ["run[old]", "run[/b]"])
def test_error_line_prints_brackets_verbatim(folder_name, ccx, plate, write_model, tmp_path, monkeypatch):
    # rich markup in a path must neither vanish ("[old]") nor crash the printer ("[/b]")
    _misspell_boundary(monkeypatch)
    path = write_model(plate("quad4", (2, 2), "clamped", modes=2))
    out = tmp_path / folder_name
    msg = error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]), SolverRunError.exit_code)
    assert f"(log: {out / 'calculix' / 'job.log'})" in msg


# --- 12. a truncated .frd -----------------------------------------------------------------

@pytest.mark.solver
def test_truncated_frd_is_a_parse_error(ccx, plate, write_model, tmp_path):
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    prep, (o,) = run_model(path, tmp_path / "out")
    assert o.ok, o.error
    folder = o.folder
    frd = folder / "job.frd"
    full = frd.read_bytes()
    adapter = CalculixAdapter()
    job = make_job(prep)
    record = RunRecord(command=["ccx"], returncode=0, wall_time=60.0, log_path=folder / "job.log")
    adapter.read_results(job, folder, record)  # the untouched file reads
    end = full.rindex(b" 9999")
    # inside the last record of the first DISP block (the deck asks for a binary .frd by default: its
    # records have no ' -1' marker; a text line '    1P…' follows the block in both formats)
    last_record = full.index(b"\n    1P", full.index(b"DISP")) - 6
    cuts = {"half": len(full) // 2, "no end record": end, "inside a record": last_record, "one byte": 1}
    for what, n in cuts.items():
        frd.write_bytes(full[:n])
        with pytest.raises(ResultParseError) as info:
            adapter.read_results(job, folder, record)
        assert str(frd) in str(info.value), what


@pytest.mark.solver
def test_truncated_frd_leaves_no_result(ccx, plate, write_model, tmp_path, monkeypatch):
    original = CalculixAdapter.run

    def run_then_truncate(self, job, workdir):
        record = original(self, job, workdir)
        frd = Path(workdir) / f"{job.jobname}.frd"
        frd.write_bytes(frd.read_bytes()[: frd.stat().st_size // 2])
        return record

    monkeypatch.setattr(CalculixAdapter, "run", run_then_truncate)
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    out = tmp_path / "out"
    msg = error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]), ResultParseError.exit_code)
    assert "job.frd" in msg and "truncated" in msg
    _assert_failed_folder(out / "calculix", ResultParseError)


# --- 13. a run past its timeout ------------------------------------------------------------

def _pids_with_cwd_under(folder: Path, names: tuple[str, ...] | None = None) -> list[int]:
    """Live processes whose working directory lies in ``folder`` (optionally: named ``names``)."""
    folder = folder.resolve()
    try:
        import psutil
    except ImportError:
        psutil = None
    if psutil is not None:
        found = []
        for p in psutil.process_iter(["pid", "name", "cwd", "status"]):
            cwd = p.info.get("cwd")
            if not cwd or p.info.get("status") == psutil.STATUS_ZOMBIE:
                continue
            if (names is None or p.info.get("name") in names) and Path(cwd).is_relative_to(folder):
                found.append(p.info["pid"])
        return found
    if names is not None:
        pids = []
        for name in names:
            proc = subprocess.run(["pgrep", "-x", name], capture_output=True, text=True)
            pids += [int(x) for x in proc.stdout.split()]
    else:
        pids = [int(p.name) for p in Path("/proc").iterdir() if p.name.isdigit()]
    found = []
    for pid in pids:
        try:
            cwd = os.readlink(f"/proc/{pid}/cwd")  # fails for a zombie or a vanished process
        except OSError:
            continue
        if Path(cwd).is_relative_to(folder):
            found.append(pid)
    return found


def _eventually_none(folder: Path, names=None, within: float = 2.0) -> list[int]:
    deadline = time.monotonic() + within
    while (left := _pids_with_cwd_under(folder, names)) and time.monotonic() < deadline:
        time.sleep(0.05)
    return left


@pytest.mark.solver
def test_timeout_stops_ccx(ccx, plate, write_model, tmp_path):
    # a 20 × 20 quad4 plate takes ccx about 0.7 s here (measured), far beyond the 0.01 s limit
    path = write_model(plate("quad4", (20, 20), "clamped", modes=10, extra='[run]\ntimeout = "0.01 s"\n'))
    out = tmp_path / "out"
    t0 = time.perf_counter()
    msg = error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]), SolverTimeoutError.exit_code)
    assert "ran past its time limit of 0.01 s and was stopped" in msg
    _assert_failed_folder(out / "calculix", SolverTimeoutError)
    assert _eventually_none(out, ("ccx",)) == []
    assert time.perf_counter() - t0 < 3.0  # the test budget (brief: ≤ 3 s per test)


def test_timeout_kills_the_whole_process_group(tmp_path, monkeypatch):
    # a stand-in solver that leaves a grandchild behind unless its process group is killed
    fake = tmp_path / "fakeccx"
    fake.write_text("#!/bin/sh\nsleep 30 &\nwait\n")
    fake.chmod(0o755)
    monkeypatch.setenv("MODEBRIDGE_CCX", str(fake))
    work = tmp_path / "work"
    work.mkdir()
    t0 = time.perf_counter()
    with pytest.raises(SolverTimeoutError, match="time limit of 0.2 s"):
        ccx_runner.run_ccx(work, "job", timeout=0.2)
    assert time.perf_counter() - t0 < 2.0  # stopped at the limit, not after the child's 30 s
    assert _eventually_none(work) == []


# --- 14. names crafted to smuggle a card ------------------------------------------------

_SMUGGLE = {
    "region key": ('[regions.rim]', '[regions."rim\\n*STEP"]', 'regions."rim\\n*STEP"'),
    "material key": ('[materials.steel]', '[materials."steel\\n*BOUNDARY"]', 'materials."steel\\n*BOUNDARY"'),
    "region key CR": ('[regions.rim]', '[regions."rim\\r*STEP"]', 'regions."rim\\r*STEP"'),
    "material reference": ('material = "steel"', 'material = "steel\\n*BOUNDARY"', "section.material"),
    "support region": ('region = "rim"', 'region = "rim\\n*STEP"', "supports[0].region"),
}


@pytest.mark.parametrize("case", list(_SMUGGLE))
def test_crafted_name_rejected_and_escaped(case, plate, write_model, tmp_path):
    old, new, shown = _SMUGGLE[case]
    text = _small_plate(plate)
    assert old in text
    path = write_model(text.replace(old, new, 1))
    with pytest.raises(ModelError) as info:
        load_model(path)
    message = str(info.value)
    assert "\n" not in message and "\r" not in message  # no raw control character
    assert shown in message  # the key, where shown, appears escaped (a backslash and a letter)
    assert "not an accepted name" in message and "letters, digits, _ or -" in message
    out = tmp_path / "out"
    msg = error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]), ModelError.exit_code)
    assert shown in msg
    assert not out.exists()


# --- 15. paths out of the run folder -------------------------------------------------------

@pytest.mark.parametrize("name", ["../../etc/passwd", "..", "/etc/passwd", "a/b", "a\\b"])
def test_model_name_that_is_a_path_is_rejected(name, plate, write_model, tmp_path):
    # a TOML literal string: the name arrives exactly as written, backslashes included
    path = write_model(_small_plate(plate).replace('name = "steel plate clamped"', f"name = '{name}'"))
    out = tmp_path / "out"
    msg = error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]), ModelError.exit_code)
    assert f"{path}: name: not an accepted model name" in msg and "no slashes" in msg
    assert not out.exists()


@pytest.mark.parametrize("parts", [("..",), ("../x",), ("a/../../x",), ("calculix", "..", ".."),
                                   ("/etc/passwd",)])
def test_inside_refuses_escaping_paths(parts, tmp_path):
    with pytest.raises(BridgeError, match="refusing to write outside the run folder"):
        inside(tmp_path, *parts)


def test_inside_accepts_paths_that_stay(tmp_path):
    assert inside(tmp_path, "a/../b") == tmp_path.resolve() / "b"
    assert inside(tmp_path, "calculix") == tmp_path.resolve() / "calculix"


def test_inside_refuses_a_symlink_out(tmp_path):
    (tmp_path / "base").mkdir()
    (tmp_path / "base" / "link").symlink_to(tmp_path)
    with pytest.raises(BridgeError):
        inside(tmp_path / "base", "link", "x")


# --- 16. --debug shows the traceback -------------------------------------------------------

def test_debug_lets_the_exception_through(plate, write_model):
    path = write_model(_small_plate(plate).replace('thickness = "2 mm"', 'thickness = "2"'))
    with pytest.raises(UnitError):
        runner.invoke(app, ["--debug", "check", str(path)], catch_exceptions=False)
    result = runner.invoke(app, ["--debug", "check", str(path)])
    assert isinstance(result.exception, UnitError) and result.exc_info[2] is not None
    # the flag does not stick to the next command of the same process
    assert "section.thickness" in error_line(runner.invoke(app, ["check", str(path)]), UnitError.exit_code)


def test_internal_error_is_one_line_unless_debug(plate, write_model, monkeypatch):
    def broken(*a, **k):
        raise RuntimeError("a bug\nover two lines")

    monkeypatch.setattr("bridge.pipeline.prepare", broken)
    path = write_model(_small_plate(plate))
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == INTERNAL  # bridge/cli/__init__.py
    assert isinstance(result.exception, SystemExit) and "Traceback" not in result.output
    (line,) = result.stderr.splitlines()
    assert line.startswith("internal error: RuntimeError: a bug over two lines") and "--debug" in line
    with pytest.raises(RuntimeError):
        runner.invoke(app, ["--debug", "check", str(path)], catch_exceptions=False)


# --- 17. an earlier complete result is removed before a failing re-run ------------------------

@pytest.mark.solver
def test_failing_rerun_removes_earlier_result(ccx, plate, write_model, tmp_path, monkeypatch):
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    out = tmp_path / "out"
    good = runner.invoke(app, ["run", str(path), "--out", str(out)])
    assert good.exit_code == 0, good.output
    folder = out / "calculix"
    assert (folder / "result.vtkhdf").is_file() and (folder / "summary.json").is_file()
    _misspell_boundary(monkeypatch)
    error_line(runner.invoke(app, ["run", str(path), "--out", str(out)]), SolverRunError.exit_code)
    _assert_failed_folder(folder, SolverRunError)


@pytest.mark.solver
def test_rerun_failing_in_meshing_removes_earlier_result(ccx, plate, write_model, tmp_path):
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    out = tmp_path / "out"
    assert runner.invoke(app, ["run", str(path), "--out", str(out)]).exit_code == 0
    # same model, but the support's region selects nothing: a MeshingError
    bad = plate("quad4", (4, 4), "clamped", modes=3).replace(
        'select = "sides"\nsides = ["xmin", "xmax", "ymin", "ymax"]',
        'select = "box"\nmin = ["500 mm", "500 mm", "0 mm"]\nmax = ["600 mm", "600 mm", "0 mm"]')
    bad_path = write_model(bad, "bad.toml")
    msg = error_line(runner.invoke(app, ["run", str(bad_path), "--out", str(out)]))
    assert "picks no geometric entity" in msg
    assert not (out / "calculix" / "result.vtkhdf").exists()
    assert not (out / "calculix" / "summary.json").exists()


@pytest.mark.solver
def test_missing_second_solver_removes_its_earlier_result(ccx, plate, write_model, tmp_path):
    path = write_model(plate("quad4", (4, 4), "clamped", modes=3))
    out = tmp_path / "out"
    _, (o,) = run_model(path, out)
    assert o.ok, o.error
    # an earlier complete run of "fake" in the same folder (its executable has gone since)
    (out / "fake").mkdir()
    shutil.copy(o.folder / "result.vtkhdf", out / "fake" / "result.vtkhdf")
    adapter = _FakeAdapter(exe=None)
    adapter.capabilities = CalculixAdapter.capabilities
    _, outcomes = run_model(path, out, solvers=["calculix", "fake"], pm=_fake_pm(adapter, entrypoints=True))
    assert [x.ok for x in outcomes] == [True, False]
    assert isinstance(outcomes[1].error, SolverNotFoundError)
    _assert_failed_folder(out / "fake", SolverNotFoundError)
    assert (out / "calculix" / "result.vtkhdf").is_file()  # the solver that ran keeps its result
