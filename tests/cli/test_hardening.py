"""Issue 12: nothing lost, nothing overwritten, no wrong result under concurrency, faults or
hostile input. Each numbered failure of the issue is a test here, through the real CLI
(``python -m bridge.cli`` in a subprocess, the worktree's code on PYTHONPATH) and with real
CalculiX where a solver is involved.

Exit codes are the ``exit_code`` of the error classes in bridge/errors.py (source of each
expected number below); "one clear line" is checked by :func:`one_line`.
"""

from __future__ import annotations

import json
import os
import re
import resource
import signal
import socket
import stat
import subprocess
import sys
import time
from pathlib import Path

import h5py
import numpy as np
import pytest

from bridge.errors import (FolderBusyError, MeshingError, ModelError, OutputError, PluginError,
                           ResultFileError, ResultParseError, SolverRunError)
from bridge.model import load_model
from bridge.records import read_record
from bridge.results import load_result

ROOT = Path(__file__).resolve().parents[2]
PYPATH = os.pathsep.join(str(ROOT / p) for p in ("", "plugins/calculix", "plugins/kratos", "plugins/opensees"))
_ANSI = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")


def env_for(tmp: Path, **extra) -> dict:
    env = dict(os.environ, PYTHONPATH=PYPATH, MODEBRIDGE_CACHE=str(tmp / "cache"), COLUMNS="200")
    env.update({k: str(v) for k, v in extra.items()})
    return env


#: A converge study that ran to its end: exit 0 (converged) or 10 (the verdict says a mode is not
#: converged — these tiny 2 x 2 plates are far from it). These tests are about files, locks and
#: faults, not about convergence.
STUDY_FINISHED = (0, 10)


def cli(*args, cwd: Path, env: dict | None = None, timeout: float = 300, preexec=None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "bridge.cli", *map(str, args)], cwd=cwd, capture_output=True,
                          text=True, timeout=timeout, env=env or env_for(cwd), preexec_fn=preexec)


class _Done:
    def __init__(self, code, stdout, stderr):
        self.returncode, self.stdout, self.stderr = code, stdout, stderr


def inproc(*args, cwd: Path) -> _Done:
    """The same typer app in this process (no interpreter start-up): for mistakes that need no
    process-level setting (limits, signals, environment)."""
    from typer.testing import CliRunner

    from bridge.cli import app

    old = os.getcwd()
    os.chdir(cwd)
    try:
        res = CliRunner().invoke(app, [str(a) for a in args])
    finally:
        os.chdir(old)
    assert res.exception is None or isinstance(res.exception, SystemExit), repr(res.exception)
    return _Done(res.exit_code, res.stdout, res.stderr)


def popen(*args, cwd: Path, env: dict) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "bridge.cli", *map(str, args)], cwd=cwd, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)


def one_line(res, code: int) -> str:
    """The single ``error:`` line of a refused command, after checking the contract."""
    err = _ANSI.sub("", res.stderr)
    assert res.returncode == code, (res.returncode, res.stdout[-2000:], err[-3000:])
    assert "Traceback" not in err and "Traceback" not in res.stdout, err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("error: ") and "internal error" not in lines[0], lines[0]
    return lines[0]


STEEL = ('youngs_modulus = "210 GPa"', 'density = "7850 kg/m^3"')
ALU = ('youngs_modulus = "70 GPa"', 'density = "2700 kg/m^3"')


def plate_text(material=STEEL, divisions=(4, 4), modes=3, name="tiny plate", extra="", mesh_extra="") -> str:
    return f"""
name = "{name}"
{extra}
[geometry]
kind = "plate"
length = "100 mm"
width = "100 mm"

[materials.mat]
{material[0]}
poisson_ratio = 0.3
{material[1]}

[section]
kind = "shell"
material = "mat"
thickness = "2 mm"

[regions.rim]
select = "sides"
sides = ["xmin", "xmax", "ymin", "ymax"]

[[supports]]
region = "rim"
kind = "clamped"

[analysis]
modes = {modes}

[mesh]
family = "quad4"
divisions = [{divisions[0]}, {divisions[1]}]
{mesh_extra}
"""


def write(path: Path, text: str) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(text, encoding="utf-8")
    return path


def slow_ccx(tmp: Path, ccx: str, delay: float = 2.0, name: str = "ccx-slow") -> Path:
    """A stand-in for ccx that waits ``delay`` s (so runs overlap) and then runs the real one."""
    w = tmp / name
    w.write_text(f"#!/bin/sh\necho $$ >> '{tmp / (name + '.pids')}'\nsleep {delay}\nexec '{ccx}' \"$@\"\n")
    w.chmod(0o755)
    return w


def wait_for(predicate, timeout: float = 120.0, step: float = 0.05) -> bool:
    end = time.time() + timeout
    while time.time() < end:
        if predicate():
            return True
        time.sleep(step)
    return False


def alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().split(") ")[-1].split()[0] != "Z"
    except OSError:
        return False


@pytest.fixture(scope="module")
def steel_run(tmp_path_factory):
    """One real run of the tiny steel plate, shared by the tests that only read it."""
    import shutil

    if shutil.which("ccx") is None:
        if os.environ.get("CI"):
            pytest.fail("ccx missing in CI")
        pytest.skip("ccx not installed")
    tmp = tmp_path_factory.mktemp("steel")
    model = write(tmp / "steel.toml", plate_text())
    res = cli("run", model, "--out", tmp / "run", cwd=tmp)
    assert res.returncode == 0, res.stderr
    return tmp, model, tmp / "run"


# --- 1. two runs into one --out folder -------------------------------------------------------

@pytest.mark.solver
def test_1_second_run_into_a_busy_folder_is_refused(ccx, tmp_path):
    steel = write(tmp_path / "steel.toml", plate_text(STEEL))
    alu = write(tmp_path / "alu.toml", plate_text(ALU))
    env = env_for(tmp_path, MODEBRIDGE_CCX=slow_ccx(tmp_path, ccx, 4.0))
    first = popen("run", steel, "--out", "shared", "--json", cwd=tmp_path, env=env)
    assert wait_for(lambda: (tmp_path / "shared" / "calculix" / "job.inp").is_file())
    second = cli("run", alu, "--out", "shared", "--json", cwd=tmp_path, env=env)
    line = one_line(second, FolderBusyError.exit_code)  # 75
    assert "another modebridge run" in line and "shared" in line
    out, err = first.communicate(timeout=300)
    assert first.returncode == 0, err
    # the result that exists is the steel model's, by content hash and by physics: f ∝ √(E/ρ)
    r = load_result(tmp_path / "shared" / "calculix" / "result.vtkhdf")
    assert r.metadata["provenance"]["model_hash"] == load_model(steel).content_hash()
    assert json.loads(out)["frequencies_hz"] == [float(f) for f in r.frequencies]


# --- 2. writes never follow symlinks nor overwrite the user's files ----------------------------

@pytest.mark.solver
def test_2_out_folder_whose_model_toml_is_a_symlink(ccx, tmp_path):
    victim = write(tmp_path / "precious.txt", "mine\n")
    model = write(tmp_path / "m.toml", plate_text())
    (tmp_path / "o_sym").mkdir()
    (tmp_path / "o_sym" / "model.toml").symlink_to(victim)
    res = cli("run", model, "--out", "o_sym", cwd=tmp_path)
    line = one_line(res, OutputError.exit_code)  # 73
    assert "symbolic link" in line and "model.toml" in line
    assert victim.read_text() == "mine\n"


@pytest.mark.solver
def test_2_run_into_the_users_own_folder_keeps_their_model(ccx, tmp_path):
    mine = write(tmp_path / "model.toml", plate_text(name="my own model"))
    write(tmp_path / "mesh.vtu", "my mesh\n")
    other = write(tmp_path / "other.toml", plate_text(ALU, name="other model"))
    before = {p.name: p.read_bytes() for p in (mine, tmp_path / "mesh.vtu")}
    res = cli("run", other, "--out", ".", cwd=tmp_path)
    line = one_line(res, OutputError.exit_code)
    assert "was not written by a modebridge run" in line
    assert {p: (tmp_path / p).read_bytes() for p in before} == before
    # running the folder's own model.toml into it is fine: it is read, never written
    os.remove(tmp_path / "mesh.vtu")
    res = cli("run", "model.toml", "--out", ".", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert mine.read_bytes() == before["model.toml"]


@pytest.mark.solver
@pytest.mark.parametrize("cmd, target", [
    (["report", "RUN"], "RUN/calculix/result.vtkhdf"),
    (["report", "RUN"], "RUN/model.toml"),
    (["export", "RUN/calculix", "--format", "csv"], "RUN/calculix/result.vtkhdf"),
    (["export", "RUN/calculix", "--format", "csv"], "RUN/model.toml"),
    (["export", "RUN/calculix", "--format", "vtu"], "MODEL"),
])
def test_2_report_and_export_never_overwrite_results_or_models(cmd, target, steel_run):
    tmp, model, run = steel_run
    sub = {"RUN": str(run), "MODEL": str(model)}
    args = [sub.get(a, a.replace("RUN", str(run))) for a in cmd]
    target = Path(sub.get(target, target.replace("RUN", str(run))))
    before = target.read_bytes()
    res = inproc(*args, "--out", target, cwd=tmp)
    line = one_line(res, OutputError.exit_code)
    assert str(target.name) in line and "never overwrites" in line
    assert target.read_bytes() == before
    load_model(model)  # still a model


# --- 3. disk full ------------------------------------------------------------------------------

def _fsize_limit(limit: int):
    def pre():  # a full disk, as far as this process tree is concerned: writes get EFBIG
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return pre


@pytest.mark.solver
@pytest.mark.parametrize("limit", [0, 300, 1000, 3000, 8000, 16000])
def test_3_disk_full_during_a_run_is_named_and_leaves_no_result(limit, ccx, tmp_path):
    # file sizes of this run (measured): model.toml 0.4 kB, mesh.vtu 1.4 kB, job.frd 11 kB (ASCII; the binary default is smaller),
    # result.vtkhdf 22 kB: each limit stops a different write
    model = write(tmp_path / "m.toml", plate_text())
    res = cli("run", model, "--out", "o", cwd=tmp_path, preexec=_fsize_limit(limit))
    assert res.returncode > 0  # never a native crash (negative: killed by a signal)
    line = one_line(res, res.returncode)
    assert res.returncode in (OutputError.exit_code, SolverRunError.exit_code), line  # 73 or 7
    if res.returncode == OutputError.exit_code:
        assert re.search(r"/?o/\S*: cannot write: no space left", line) or "o/" in line, line
    else:
        assert "CalculiX" in line and "log:" in line  # the solver's failure, with its log named
    assert not (tmp_path / "o" / "calculix" / "result.vtkhdf").exists()
    assert not list((tmp_path / "o").rglob("*.part*"))  # no temporary file left behind


@pytest.mark.solver
def test_3_solver_error_is_not_hidden_by_a_failing_error_txt(ccx, tmp_path):
    # a ccx that fails, after putting a folder where error.txt goes: the handler's own write fails
    fake = tmp_path / "ccx-fails"
    fake.write_text("#!/bin/sh\nmkdir error.txt\necho '*ERROR in something: the solver broke'\nexit 3\n")
    fake.chmod(0o755)
    model = write(tmp_path / "m.toml", plate_text())
    res = cli("run", model, "--out", "o", cwd=tmp_path, env=env_for(tmp_path, MODEBRIDGE_CCX=fake))
    line = one_line(res, SolverRunError.exit_code)  # the solver's error and its code (7) ...
    assert "the solver broke" in line
    assert "error.txt could not be written" in line  # ... and the second fault, named after it


@pytest.mark.solver
def test_3_study_record_survives_a_full_disk(ccx, tmp_path):
    model = write(tmp_path / "m.toml", plate_text(divisions=(2, 2), modes=2))
    res = cli("converge", model, "--levels", "3", "--out", "st", "--json", cwd=tmp_path)
    assert res.returncode in STUDY_FINISHED, res.stderr
    record = tmp_path / "st" / "convergence.json"
    before = record.read_bytes()
    again = cli("converge", model, "--levels", "3", "--out", "st", "--json", cwd=tmp_path,
                preexec=_fsize_limit(200))
    line = one_line(again, OutputError.exit_code)
    assert "cannot write: no space left" in line and "/st/" in line  # the file is named
    assert record.read_bytes() == before  # written atomically: the old record is whole
    assert read_record(record, "convergence").checked


# --- 4. two studies into one folder ------------------------------------------------------------

@pytest.mark.solver
def test_4_second_study_into_a_busy_folder_is_refused(ccx, tmp_path):
    model = write(tmp_path / "m.toml", plate_text(divisions=(2, 2), modes=2))
    env = env_for(tmp_path, MODEBRIDGE_CCX=slow_ccx(tmp_path, ccx, 3.0))
    first = popen("converge", model, "--levels", "3", "-j", "1", "--out", "st", "--json", cwd=tmp_path, env=env)
    assert wait_for(lambda: list((tmp_path / "st" / "runs").glob("*/attempt-*")))
    second = cli("converge", model, "--levels", "3", "-j", "1", "--out", "st", cwd=tmp_path, env=env)
    line = one_line(second, FolderBusyError.exit_code)
    assert "another modebridge study" in line
    out, err = first.communicate(timeout=300)
    assert first.returncode in STUDY_FINISHED, err
    assert all(r["state"] == "done" for r in json.loads(out)["runs"])
    for folder in (tmp_path / "st" / "runs").iterdir():  # every attempt of the first study committed
        assert load_result(folder / "result.vtkhdf").n_modes == 2


# --- 5. damaged cached results ---------------------------------------------------------------

@pytest.mark.solver
def test_5_truncated_cached_result_is_run_again_and_said(ccx, tmp_path):
    model = write(tmp_path / "m.toml", plate_text(divisions=(2, 2), modes=2))
    res = cli("converge", model, "--levels", "3", "--out", "st", "--json", cwd=tmp_path)
    assert res.returncode in STUDY_FINISHED, res.stderr
    first = json.loads(res.stdout)
    victim = next((tmp_path / "st" / "runs").iterdir()) / "result.vtkhdf"
    victim.write_bytes(victim.read_bytes()[:5000])  # summary.json intact, result truncated
    res = cli("converge", model, "--levels", "3", "--out", "st", "--json", cwd=tmp_path)
    assert res.returncode in STUDY_FINISHED, res.stderr
    again = json.loads(res.stdout)
    states = sorted(r["state"] for r in again["runs"])
    assert states == ["cached", "cached", "done"]  # only the damaged one ran again
    assert "damaged" in res.stderr and "run again" in res.stderr
    assert load_result(victim).n_modes == 2
    assert [m["f_hz"] for m in again["modes"]] == [m["f_hz"] for m in first["modes"]]


def _flip(path: Path, dataset: str) -> None:
    with h5py.File(path, "r") as f:
        offset = f[dataset].id.get_offset()
    data = bytearray(path.read_bytes())
    for k in range(offset + 3, offset + 11):
        data[k] ^= 0xFF
    path.write_bytes(bytes(data))


@pytest.mark.solver
def test_5_result_with_flipped_bytes_is_refused(steel_run, tmp_path):
    tmp, model, run = steel_run
    copy = tmp_path / "result.vtkhdf"
    copy.write_bytes((run / "calculix" / "result.vtkhdf").read_bytes())
    _flip(copy, "modebridge/effective_mass")
    res = inproc("export", copy, "--format", "csv", "--out", tmp_path / "t.csv", cwd=tmp_path)
    line = one_line(res, ResultFileError.exit_code)  # 8
    assert "checksum mismatch" in line and "result.vtkhdf" in line
    assert not (tmp_path / "t.csv").exists()


# --- 6. size guards --------------------------------------------------------------------------

@pytest.mark.parametrize("mesh, field", [
    ('size = "0.001 mm"', "mesh.size"),
    ("divisions = [2000, 2000]", "mesh.divisions"),
])
def test_6_oversized_mesh_is_refused_before_meshing(mesh, field, tmp_path):
    text = plate_text().replace("divisions = [4, 4]", mesh)
    write(tmp_path / "m.toml", text)
    t0 = time.time()
    res = inproc("check", "m.toml", cwd=tmp_path)
    line = one_line(res, ModelError.exit_code)  # 3
    assert field in line and "DOF" in line and "max_dof" in line
    assert time.time() - t0 < 60  # refused from the estimate, not after meshing (common practice)


def test_6_converge_levels_beyond_the_limit_refused_before_any_run(tmp_path):
    write(tmp_path / "m.toml", plate_text())
    res = inproc("converge", "m.toml", "--levels", "8", "--ratio", "4", "--out", "st", cwd=tmp_path)
    line = one_line(res, ModelError.exit_code)
    assert "refinement level 7" in line and "DOF" in line
    assert not (tmp_path / "st" / "runs").exists()


def test_6_max_dof_overrides_the_limit(tmp_path):
    from bridge.guards import DEFAULT_MAX_DOF, check_size
    from bridge.model import parse_model

    # 1000 × 1000 quad4: 1001² nodes × 6 DOF = 6.0 M DOF, above the default limit
    write(tmp_path / "big.toml", plate_text(divisions=(1000, 1000)))
    raw = __import__("tomllib").loads((tmp_path / "big.toml").read_text())
    with pytest.raises(ModelError, match="max_dof"):
        check_size(parse_model(raw))
    raw["mesh"]["max_dof"] = 7_000_000
    est = check_size(parse_model(raw))
    assert est.dof == 6 * 1001 * 1001 > DEFAULT_MAX_DOF  # exact for a structured quad4 mesh
    # and the field works in a model file, both ways, through the CLI
    write(tmp_path / "small.toml", plate_text(mesh_extra="max_dof = 10"))
    assert "above the limit of 10 DOF" in one_line(inproc("check", "small.toml", cwd=tmp_path), 3)


@pytest.mark.parametrize("kind", ["fifo", "dev_zero", "directory"])
def test_6_model_that_is_not_a_regular_file(kind, tmp_path):
    if kind == "fifo":
        target = tmp_path / "model.toml"
        os.mkfifo(target)  # nobody ever writes: reading it would hang
        expect = "named pipe"
    elif kind == "dev_zero":
        target = Path("/dev/zero")
        expect = "device"
    else:
        target = tmp_path / "folder.toml"
        target.mkdir()
        expect = "is a folder"
    res = cli("check", target, cwd=tmp_path, timeout=60)
    assert expect in one_line(res, ModelError.exit_code)


# --- 7. orphans --------------------------------------------------------------------------------

@pytest.mark.solver
def test_7_workers_die_with_the_study(ccx, tmp_path):
    model = write(tmp_path / "m.toml", plate_text(divisions=(2, 2), modes=2))
    slow = slow_ccx(tmp_path, ccx, 60.0)
    env = env_for(tmp_path, MODEBRIDGE_CCX=slow)
    study = popen("converge", model, "--levels", "4", "-j", "2", "--out", "st", "--json", cwd=tmp_path, env=env)
    pids_file = tmp_path / "ccx-slow.pids"
    assert wait_for(lambda: pids_file.is_file() and len(pids_file.read_text().split()) >= 2, 180)
    workers = [int(p.name) for p in Path("/proc").iterdir() if p.name.isdigit() and _ppid(int(p.name)) == study.pid]
    assert len(workers) >= 2
    os.kill(study.pid, signal.SIGKILL)  # the parent only, not its process group
    study.wait()
    solvers = [int(x) for x in pids_file.read_text().split()]
    assert wait_for(lambda: not any(alive(p) for p in workers + solvers), 20), \
        [(p, _cmdline(p)) for p in workers + solvers if alive(p)]
    launched = len(pids_file.read_text().split())
    time.sleep(3)
    assert len(pids_file.read_text().split()) == launched  # no queued task started after the kill


def _cmdline(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes().replace(b"\0", b" ").decode()
    except OSError:
        return ""


def _ppid(pid: int) -> int:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return int(fh.read().split(") ")[-1].split()[1])
    except (OSError, ValueError, IndexError):
        return -1


@pytest.mark.solver
def test_7_attempt_folders_are_cleaned(ccx, tmp_path):
    model = write(tmp_path / "m.toml", plate_text(divisions=(2, 2), modes=2))
    assert cli("converge", model, "--levels", "3", "--out", "st", cwd=tmp_path).returncode in STUDY_FINISHED
    task = next((tmp_path / "st" / "runs").iterdir())
    (task / "attempt-0123456789ab" / "calculix").mkdir(parents=True)  # left by a killed run
    res = cli("converge", model, "--levels", "3", "--out", "st", "--json", cwd=tmp_path)
    assert res.returncode in STUDY_FINISHED, res.stderr
    assert not list((tmp_path / "st" / "runs").glob("*/attempt-*"))


# --- 8. the solver version probe -----------------------------------------------------------------

def test_8_a_hanging_version_probe_is_cut_short_and_its_children_killed(tmp_path):
    hang = tmp_path / "ccx-hangs"
    hang.write_text(f"#!/bin/sh\nsleep 300 &\necho $! > '{tmp_path / 'child.pid'}'\nsleep 300\n")
    hang.chmod(0o755)
    t0 = time.time()
    res = cli("solvers", "--json", cwd=tmp_path, env=env_for(tmp_path, MODEBRIDGE_CCX=hang), timeout=120)
    took = time.time() - t0
    assert res.returncode == 0, res.stderr
    row = next(r for r in json.loads(res.stdout) if r["name"] == "calculix")
    assert row["solver_version"] is None
    from modebridge_calculix.runner import PROBE_TIMEOUT

    assert took < PROBE_TIMEOUT + 30  # the probe's limit plus start-up, not 20 s per probe
    child = int((tmp_path / "child.pid").read_text())
    assert wait_for(lambda: not alive(child), 10)  # its whole process group was killed


def test_8_version_is_probed_once_per_executable(tmp_path):
    log = tmp_path / "probes.log"
    fake = tmp_path / "ccx-version"
    fake.write_text(f"#!/bin/sh\necho probe >> '{log}'\necho 'This is Version 2.20'\n")
    fake.chmod(0o755)
    env = env_for(tmp_path, MODEBRIDGE_CCX=fake)
    for _ in range(2):
        res = cli("solvers", "--json", cwd=tmp_path, env=env)
        assert next(r for r in json.loads(res.stdout) if r["name"] == "calculix")["solver_version"] == "2.20"
    assert log.read_text().split() == ["probe"]  # cached in MODEBRIDGE_CACHE
    assert (tmp_path / "cache" / "probes.json").is_file()


# --- 9. exit 70 never for an ordinary mistake ------------------------------------------------------

def _study(tmp: Path, body: str) -> Path:
    write(tmp / "m.toml", plate_text())
    return write(tmp / "study.toml", 'model = "m.toml"\n' + body)


@pytest.mark.parametrize("body, field", [
    ("set = 5\n", "set"),
    ("variant = 5\n", "variant"),
    ('[[variant]]\nname = "a"\nset = 5\n', "variant[0].set"),
])
def test_9_bad_study_files(body, field, tmp_path):
    _study(tmp_path, body)
    res = inproc("vary", "study.toml", "--out", "st", cwd=tmp_path)
    assert field in one_line(res, ModelError.exit_code)


def test_9_vary_on_a_directory(tmp_path):
    (tmp_path / "d").mkdir()
    assert "is a folder" in one_line(inproc("vary", "d", cwd=tmp_path), ModelError.exit_code)


@pytest.mark.parametrize("out, expect", [
    ("a_file", "is a file, not a folder"),
    ("a_file/sub", "a file stands where a folder is needed"),
    ("/proc/modebridge-out", "cannot write"),
])
def test_9_out_that_cannot_be_a_folder(out, expect, tmp_path):
    write(tmp_path / "a_file", "x\n")
    write(tmp_path / "m.toml", plate_text())
    res = inproc("run", "m.toml", "--out", out, cwd=tmp_path)
    assert expect in one_line(res, OutputError.exit_code)


@pytest.mark.solver
def test_9_compare_csv_into_a_missing_folder(steel_run, tmp_path):
    _, _, run = steel_run
    r = run / "calculix"
    res = inproc("compare", r, r, "--csv", tmp_path / "nope" / "t.csv", cwd=tmp_path)
    assert "does not exist" in one_line(res, OutputError.exit_code)


@pytest.mark.parametrize("length", ["1e-30 mm", "1e30 mm"])
def test_9_and_11_lengths_out_of_range(length, tmp_path):
    write(tmp_path / "m.toml", plate_text().replace('length = "100 mm"', f'length = "{length}"'))
    line = one_line(inproc("check", "m.toml", cwd=tmp_path), ModelError.exit_code)
    assert "geometry.length" in line and "outside what modebridge meshes" in line


def test_9_deeply_nested_toml(tmp_path):
    (tmp_path / "deep.toml").write_text("a = " + "[" * 50000 + "]" * 50000 + "\n")
    assert "nested too deeply" in one_line(inproc("check", "deep.toml", cwd=tmp_path), ModelError.exit_code)


def _edit(path: Path, how: str, keep_checksum: bool) -> None:
    with h5py.File(path, "r+") as f:
        g = f["modebridge"]
        meta = json.loads(g.attrs["metadata"])
        if how == "n_modes":
            meta["n_modes"] = 10**9
        elif how == "nan":
            fr = g["frequencies"][()]
            fr[0] = np.nan
            g["frequencies"][...] = fr
        elif how == "points":
            f["VTKHDF/NumberOfPoints"][...] = 0
        elif how == "meta_type":
            meta = [1, 2, 3]
        g.attrs["metadata"] = json.dumps(meta)
        if not keep_checksum:  # as a format-1 file: no checksum, only the structural checks
            del g.attrs["sha256"]
            g.attrs["format_version"] = 1


@pytest.mark.solver
@pytest.mark.parametrize("keep_checksum", [True, False])
@pytest.mark.parametrize("how, expect", [
    ("n_modes", "n_modes"), ("nan", "not a finite number"), ("points", "point count"),
    ("meta_type", "not an object"),
])
def test_9_hand_edited_results(how, expect, keep_checksum, steel_run, tmp_path):
    _, _, run = steel_run
    copy = tmp_path / "result.vtkhdf"
    copy.write_bytes((run / "calculix" / "result.vtkhdf").read_bytes())
    _edit(copy, how, keep_checksum)
    res = inproc("export", copy, "--format", "csv", "--out", tmp_path / "t.csv", cwd=tmp_path)
    line = one_line(res, ResultFileError.exit_code)
    if keep_checksum:  # the structure is checked first (nothing allocated from a bad count), then the checksum
        assert expect in line or "checksum mismatch" in line, line
    else:
        assert expect in line, line


# --- 10. another model's result files --------------------------------------------------------------

@pytest.mark.solver
def test_10_another_models_result_files_are_refused(ccx, tmp_path):
    alu = write(tmp_path / "alu.toml", plate_text(ALU))
    assert cli("run", alu, "--out", "alu", cwd=tmp_path).returncode == 0
    time.sleep(3)  # the planted files are older than the next run (CalculiX stamps whole seconds)
    # a ccx that solves, then finds the aluminium run's files in place of its own
    swap = tmp_path / "ccx-swapped"
    swap.write_text(f"#!/bin/sh\n'{ccx}' \"$@\" || exit $?\n"
                    f"cp '{tmp_path}/alu/calculix/job.dat' '{tmp_path}/alu/calculix/job.frd' .\n")
    swap.chmod(0o755)
    steel = write(tmp_path / "steel.toml", plate_text(STEEL))
    res = cli("run", steel, "--out", "steel", cwd=tmp_path, env=env_for(tmp_path, MODEBRIDGE_CCX=swap))
    line = one_line(res, ResultParseError.exit_code)  # 8
    assert "job.frd" in line and "another run" in line
    assert not (tmp_path / "steel" / "calculix" / "result.vtkhdf").exists()


# --- 11. misleading lines ---------------------------------------------------------------------------

@pytest.mark.solver
def test_11_study_errors_name_the_real_model_file(ccx, tmp_path):
    text = plate_text().replace('sides = ["xmin", "xmax", "ymin", "ymax"]',
                                'sides = ["xmin"]\n[regions.none]\nselect = "plane"\naxis = "z"\nat = "5 mm"')
    text += '\n[[masses]]\nname = "m1"\nmass = "0.1 kg"\nregion = "none"\n'
    write(tmp_path / "panel.toml", text)
    res = cli("converge", "panel.toml", "--levels", "3", "-j", "1", "--out", "st", cwd=tmp_path)
    assert res.returncode != 0 and "Traceback" not in res.stderr
    assert "panel.toml" in res.stderr and "model.toml" not in res.stderr


@pytest.mark.parametrize("cmd", ["converge", "vary"])
def test_11_unknown_solver_in_a_study(cmd, tmp_path):
    _study(tmp_path, '[[variant]]\nname = "a"\nset = { analysis = { modes = 2 } }\n')
    target = "m.toml" if cmd == "converge" else "study.toml"
    res = inproc(cmd, target, "--solver", "nosuch", "--out", "st", cwd=tmp_path)
    line = one_line(res, PluginError.exit_code)  # 5
    assert "unknown solver 'nosuch'" in line and "calculix" in line
    assert not (tmp_path / "st").exists()


@pytest.mark.parametrize("value, expect", [("nan", "finite"), ("true", "valid number"), ('"0.3"', "valid number")])
def test_11_poisson_ratio_of_the_wrong_kind(value, expect, tmp_path):
    write(tmp_path / "m.toml", plate_text().replace("poisson_ratio = 0.3", f"poisson_ratio = {value}"))
    line = one_line(inproc("check", "m.toml", cwd=tmp_path), ModelError.exit_code)
    assert "poisson_ratio" in line and expect in line and "less than" not in line


def test_11_utf8_byte_order_mark_is_accepted(tmp_path):
    (tmp_path / "m.toml").write_bytes(b"\xef\xbb\xbf" + plate_text().encode())
    res = inproc("check", "m.toml", "--json", cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert json.loads(res.stdout)["mesh"]["nodes"] == 25  # 5 × 5 nodes of a 4 × 4 quad4 mesh (exact)


@pytest.mark.parametrize("kind", ["fifo", "dev_zero"])
def test_11_cad_file_that_is_not_a_file(kind, tmp_path):
    if kind == "fifo":
        os.mkfifo(tmp_path / "part.step")
    else:
        (tmp_path / "part.step").symlink_to("/dev/zero")
    write(tmp_path / "m.toml", """
name = "cad part"
[geometry]
kind = "cad"
file = "part.step"
[materials.steel]
youngs_modulus = "210 GPa"
poisson_ratio = 0.3
density = "7850 kg/m^3"
[section]
kind = "solid"
material = "steel"
[mesh]
family = "tet4"
size = "5 mm"
""")
    line = one_line(inproc("check", "m.toml", cwd=tmp_path), MeshingError.exit_code)  # 4
    assert "not a regular CAD file" in line and "not found" not in line


@pytest.mark.solver
def test_11_more_modes_than_free_dof(ccx, tmp_path):
    write(tmp_path / "m.toml", plate_text(divisions=(2, 2), modes=500))
    line = one_line(inproc("run", "m.toml", "--out", "o", cwd=tmp_path), ModelError.exit_code)
    assert "analysis.modes" in line and "free DOF" in line and "info=" not in line


def test_11_vary_error_prints_no_empty_table(tmp_path):
    _study(tmp_path, "")
    res = inproc("vary", "study.toml", "--out", "st", cwd=tmp_path)
    assert "no [[variant]]" in one_line(res, ModelError.exit_code)  # one line: no table before it


@pytest.mark.parametrize("args", [["run", "--bogus", "x"], ["converge", "m.toml", "--levels", "99"],
                                  ["report"]])
def test_11_command_line_errors_are_one_line(args, tmp_path):
    line = one_line(cli(*args, cwd=tmp_path), 2)
    assert "--help" in line


# --- 12. control characters in the description --------------------------------------------------------

@pytest.mark.parametrize("char", ["\\u0000", "\\u202e", "\\u001b"])
def test_12_control_characters_never_reach_a_report(char, tmp_path):
    write(tmp_path / "m.toml", plate_text(extra=f'description = "panel {char} evil"'))
    line = one_line(inproc("check", "m.toml", cwd=tmp_path), ModelError.exit_code)
    assert "description" in line and "control character" in line
    assert "\x00" not in line and "\u202e" not in line and "\x1b" not in line.replace("\x1b[", "")


# --- 13. Dask with a relative --out ----------------------------------------------------------------------

def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.solver
def test_13_dask_with_a_relative_out(ccx, tmp_path):
    port = _free_port()
    addr = f"tcp://127.0.0.1:{port}"
    dask = Path(sys.executable).with_name("dask")
    base = [str(dask)] if dask.exists() else [sys.executable, "-m", "distributed.cli.dask_spawn"]
    elsewhere = tmp_path / "worker-home"
    elsewhere.mkdir()
    env = env_for(tmp_path)
    sched = subprocess.Popen(base + ["scheduler", "--host", "127.0.0.1", "--port", str(port), "--no-dashboard"],
                             stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True, env=env)
    worker = subprocess.Popen(base + ["worker", addr, "--nworkers", "1", "--nthreads", "1", "--no-dashboard"],
                              stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True,
                              cwd=elsewhere, env=env)
    try:
        from distributed import Client

        with Client(addr, timeout="30s") as c:
            c.wait_for_workers(1, timeout=60)
            # a worker that cannot see the study folder says so
            from bridge.study.executor import execute_task

            msg = c.submit(execute_task, {}, "/nonexistent-study/runs/abc", pure=False).result(timeout=60)
            assert not msg["ok"] and "cannot see the study folder /nonexistent-study" in msg["error"]
        model = write(tmp_path / "a" / "m.toml", plate_text(divisions=(2, 2), modes=2))
        res = cli("converge", model.name, "--levels", "3", "--scheduler", addr, "--out", "../studies/x", "--json",
                  cwd=model.parent, env=env)
    finally:
        for p in (worker, sched):
            os.killpg(p.pid, signal.SIGTERM)
            p.wait(timeout=30)
    assert res.returncode in STUDY_FINISHED, res.stderr
    assert len(list((tmp_path / "studies" / "x" / "runs").glob("*/result.vtkhdf"))) == 3
    assert not (elsewhere / "studies").exists() and not list(elsewhere.rglob("*.vtkhdf"))


# --- 14. matplotlib and font caches stay in modebridge's cache folder ----------------------------------

@pytest.mark.solver
def test_14_no_cache_files_in_home(ccx, tmp_path):
    home = tmp_path / "home"
    home.mkdir()
    env = {k: v for k, v in os.environ.items()
           if k not in ("MPLCONFIGDIR", "XDG_CACHE_HOME", "XDG_CONFIG_HOME", "MODEBRIDGE_CACHE")}
    env.update(HOME=str(home), PYTHONPATH=PYPATH)
    model = write(tmp_path / "m.toml", plate_text(divisions=(2, 2), modes=2))
    res = cli("converge", model, "--levels", "3", "--out", "st", cwd=tmp_path, env=env)
    assert res.returncode in STUDY_FINISHED, res.stderr
    res = cli("report", "st", "--max-modes", "1", cwd=tmp_path, env=env)
    assert res.returncode == 0, res.stderr
    cache = home / ".cache" / "modebridge"
    stray = [p for p in home.rglob("*") if p.is_file() and cache not in p.parents]
    assert stray == []
    assert list((cache / "matplotlib").rglob("*"))  # matplotlib's font list went there
    said = cli("solvers", cwd=tmp_path, env=env)
    assert str(cache) in said.stdout  # and `modebridge solvers` says where
