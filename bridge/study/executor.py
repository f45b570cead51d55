"""Running many solver runs: content-addressed tasks, a cache that survives interruption,
local process parallelism, or a Dask distributed cluster.

Each run is a :class:`Task` keyed by a hash of everything that decides its result (the model
after its variant, the refinement level, the solver and its version, the element it gets and
its options that change a result, modebridge's version, and a CAD file's bytes). A finished task lives in ``STUDY/runs/<key>/`` as ``result.vtkhdf``
and ``summary.json``; the summary is moved in last, so a folder with a summary is complete and
is never run again. A run works in its own ``attempt-*`` folder: a run killed half-way leaves
only that folder, and the task is run again next time (an orphaned solver writing into its old
attempt folder cannot touch the new one). A failed run keeps its log and ``error.txt``; the
other tasks go on.

With a Dask scheduler address the same task function runs on the cluster's workers; they must
see the study folder (the same machine, or a shared file system). Paths are made absolute before
tasks are sent, and a worker that cannot see the study folder says so.

Safety: a study holds the lock of its folder (``bridge.io.folder_lock``) from start to end, so a
second study into the same folder is refused instead of cleaning up the first one's attempts. A
cached result is trusted only when its checksum holds and matches its summary; a damaged one is
run again and reported as ``damaged → re-run``. Local worker processes watch their parent and
stop (with their solver) when it dies, even by ``kill -9``.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import socket
import threading
import time
import uuid
from collections.abc import Callable
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__
from ..errors import BridgeError, PluginError
from ..io import atomic_write_text, folder_lock, write_fault

__all__ = ["Task", "TaskOutcome", "run_tasks", "execute_task", "plan_parallelism", "task_folder"]

Progress = Callable[[str, str], None]  # (task label, state)


@dataclass
class Task:
    label: str  #: human name, e.g. "level 2 / calculix" or "free / calculix"
    raw_model: dict  #: the model as read from TOML (units as strings), variant applied
    model_dir: str  #: folder CAD paths are relative to
    solver: str
    level: int = 0
    key: str = ""  #: filled by :func:`task_key`
    extra: dict = field(default_factory=dict)  #: study bookkeeping (variant name, …)
    model_file: str = ""  #: the file the model came from, named in errors (default: the label)

    def spec(self, threads: int) -> dict:
        return {"label": self.label, "model": self.raw_model, "model_dir": str(Path(self.model_dir).resolve()),
                "model_file": self.model_file, "solver": self.solver, "level": self.level, "key": self.key,
                "threads": threads}


@dataclass
class TaskOutcome:
    task: Task
    folder: Path
    state: str  #: "cached", "done" or "failed"
    summary: dict | None = None
    error: str | None = None
    note: str = ""  #: e.g. why a stored result was not trusted

    @property
    def ok(self) -> bool:
        return self.state in ("cached", "done")

    @property
    def result_path(self) -> Path:
        return self.folder / "result.vtkhdf"


def task_key(task: Task, solver_version: str, adapter=None) -> str:
    """Content hash of what decides the task's result: with the solver's ``adapter``, its element
    choice and the options that change a result (every declared one, defaults filled in, so an
    option given at its default keys like one left out); other solvers' options are left out."""
    from ..model import parse_model

    model = parse_model(task.raw_model, source=task.label)
    blob = {"model": model.canonical_dict(), "level": task.level, "solver": task.solver,
            "solver_version": solver_version, "modebridge": __version__}
    blob["model"].pop("solver_options", None)
    (blob["model"].get("mesh") or {}).pop("solver_family", None)  # in the element choice below
    if adapter is not None and model.mesh is not None:  # a model without continuum has no element choice
        from ..selection import choose_element, options_key, solver_options

        try:
            blob["element"] = choose_element(model, adapter).as_dict()
            blob["solver_options"] = options_key(adapter, solver_options(model, adapter))
        except BridgeError:
            pass  # the task fails when it runs, with the same error, in its own folder
    if model.geometry.kind == "cad":
        path = Path(task.model_dir) / model.geometry.file
        blob["cad_sha256"] = hashlib.sha256(path.read_bytes()).hexdigest() if path.is_file() else "missing"
    # threads and timeout do not change the result
    blob["model"].pop("run", None)
    text = json.dumps(blob, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()


def task_folder(study_dir: Path, key: str) -> Path:
    return Path(study_dir) / "runs" / key[:24]


def is_done(folder: Path) -> bool:
    return cache_state(folder)[0] == "cached"


def cache_state(folder: Path) -> tuple[str, dict | None]:
    """("cached", summary) for a finished task whose result verifies against its checksum and
    its summary; ("missing", None) when it never finished; ("damaged", None) when the files are
    there but cannot be trusted (truncated, flipped bytes, a summary of another result)."""
    from ..errors import ResultFileError
    from ..results import verify_result

    s = folder / "summary.json"
    r = folder / "result.vtkhdf"
    if not s.is_file():
        return "missing", None
    try:
        summary = json.loads(s.read_text(encoding="utf-8"))
        if not isinstance(summary, dict) or not r.is_file():
            return "damaged", None
        digest = verify_result(r)
    except (OSError, ValueError, ResultFileError):
        return "damaged", None
    if summary.get("result_sha256") != digest:
        return "damaged", None
    return "cached", summary


def execute_task(spec: dict, folder: str) -> dict:
    """Run one task into ``folder`` (a top-level function: it runs in worker processes and on
    Dask workers). Returns ``{"ok": bool, "summary" | "error": ...}``; never raises for a
    solver or model failure, nor for a write fault (it names the file)."""
    from ..cache import setup_caches
    from ..model import parse_model
    from ..pipeline import check_capabilities, make_job, prepare, record_error, run_one
    from ..plugins import get_plugin_manager, get_solver
    from ..results import result_checksum
    from ..selection import model_for, solver_options

    setup_caches()
    folder_p = Path(folder)
    runs = folder_p.parent
    if not runs.is_dir():  # the client made STUDY/runs: a worker that does not see it is elsewhere
        return {"ok": False, "error": f"worker on {socket.gethostname()} cannot see the study folder "
                                      f"{runs.parent} (workers must share its file system)"}
    try:
        folder_p.mkdir(exist_ok=True)
        attempt = folder_p / f"attempt-{uuid.uuid4().hex[:12]}"
        attempt.mkdir()
    except OSError as exc:
        return {"ok": False, "error": f"OutputError: {write_fault(folder_p, exc)}"}
    try:
        model_file = Path(spec["model_file"]) if spec.get("model_file") else None
        model = parse_model(spec["model"], source=spec.get("model_file") or spec["label"])
        adapter = get_solver(get_plugin_manager(), spec["solver"])
        choice = check_capabilities(model, adapter)
        if adapter.locate() is None:
            raise BridgeError(f"solver '{adapter.name}' is not installed on this worker")
        prep = prepare(model_for(model, choice), model_file or Path(spec["model_dir"]) / "model.toml",
                       level=spec["level"],
                       save_mesh_to=attempt / "mesh.vtu")
        job = make_job(prep, options=solver_options(model, adapter))
        job.threads = int(spec["threads"])
        outcome = run_one(adapter, prep, job, attempt, choice=choice)
        if not outcome.ok:
            raise outcome.error
        summary = dict(outcome.summary)
        summary.update(task_key=spec["key"], label=spec["label"], level=spec["level"],
                       attempt=attempt.name)
        # commit: the result first, the summary last (its presence marks the task complete)
        try:
            os.replace(outcome.folder / "result.vtkhdf", folder_p / "result.vtkhdf")
        except OSError as exc:
            raise write_fault(folder_p / "result.vtkhdf", exc) from None
        summary["result_file"] = str(folder_p / "result.vtkhdf")
        summary["result_sha256"] = result_checksum(folder_p / "result.vtkhdf")
        atomic_write_text(folder_p / "summary.json", json.dumps(summary, indent=2))
        (folder_p / "error.txt").unlink(missing_ok=True)
        return {"ok": True, "summary": summary}
    except (BridgeError, OSError) as exc:
        if not isinstance(exc, BridgeError):
            exc = write_fault(exc.filename or folder_p, exc)
        # a failure to write error.txt (a full disk) is appended to the first error, never its stand-in
        record_error(folder_p, exc, f"(attempt folder: {attempt.name})\n")
        return {"ok": False, "error": f"{type(exc).__name__}: {' '.join(str(exc).split())}"}


def plan_parallelism(n_tasks: int, workers: int | None, threads: int | None) -> tuple[int, int]:
    """Worker processes and solver threads per run, without oversubscribing the cores."""
    cores = os.cpu_count() or 1
    if workers is None:
        workers = max(1, min(n_tasks, cores if threads is None else max(1, cores // threads)))
    if threads is None:
        threads = max(1, cores // workers)
    return workers, threads


def _cleanup_attempts(folder: Path, keep: str | None = None) -> None:
    """Remove the task's attempt folders (but ``keep``); only under the study's lock."""
    for p in folder.glob("attempt-*"):
        if p.name != keep and p.is_dir() and not p.is_symlink():
            shutil.rmtree(p, ignore_errors=True)


def _watch_parent(parent: int) -> None:
    """Worker initializer: stop this worker (and its solver's process group) when the study
    process dies, even by kill -9: a study's workers never outlive it or start queued runs."""
    from ..cache import setup_caches
    from ..process import kill_active

    setup_caches()

    def watch() -> None:
        while True:
            if os.getppid() != parent:
                kill_active()
                os._exit(1)
            time.sleep(0.2)

    # a thread, not PR_SET_PDEATHSIG: gmsh installs its own C signal handlers in this process,
    # and a signal's default action would leave the solver running in its own session
    threading.Thread(target=watch, name="modebridge-parent-watch", daemon=True).start()


def run_tasks(tasks: list[Task], study_dir: str | Path, workers: int | None = None,
              threads: int | None = None, scheduler: str | None = None,
              progress: Progress = lambda label, state: None, keep_attempts: bool = False) -> list[TaskOutcome]:
    """Run every task not already finished; return their outcomes in the given order."""
    from ..plugins import get_plugin_manager, get_solvers

    solvers = get_solvers(get_plugin_manager())
    unknown = sorted({t.solver for t in tasks} - set(solvers))
    if unknown:  # refused before any folder is made
        raise PluginError(f"unknown solver '{unknown[0]}'; installed: {', '.join(sorted(solvers)) or 'none'}")
    # absolute before anything is sent: a Dask worker's working folder is not ours
    study_dir = Path(study_dir).expanduser().resolve()
    with folder_lock(study_dir, "study"):
        return _run_tasks_locked(tasks, study_dir, solvers, workers, threads, scheduler, progress, keep_attempts)


def _run_tasks_locked(tasks, study_dir: Path, solvers, workers, threads, scheduler, progress,
                      keep_attempts) -> list[TaskOutcome]:
    try:
        (study_dir / "runs").mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise write_fault(study_dir / "runs", exc) from None
    versions: dict[str, str] = {}
    for t in tasks:
        if t.solver not in versions:
            versions[t.solver] = solvers[t.solver].version() or ""
        t.key = task_key(t, versions[t.solver], solvers[t.solver])
    manifest = [{"label": t.label, "key": t.key, "solver": t.solver, "level": t.level, **t.extra} for t in tasks]
    atomic_write_text(study_dir / "study.json", json.dumps({"tasks": manifest}, indent=2))

    outcomes: dict[int, TaskOutcome] = {}
    pending: list[int] = []
    damaged: set[int] = set()
    for i, t in enumerate(tasks):
        folder = task_folder(study_dir, t.key)
        state, summary = cache_state(folder)
        if state == "cached":
            outcomes[i] = TaskOutcome(t, folder, "cached", summary)
            if not keep_attempts:
                _cleanup_attempts(folder)  # left by a run killed after an earlier success
            progress(t.label, "cached")
        else:
            if state == "damaged":
                # say so: the stored result cannot be trusted, so it is computed again
                progress(t.label, "damaged → re-run")
                damaged.add(i)
            pending.append(i)
            progress(t.label, "queued")
    if not pending:
        return [outcomes[i] for i in range(len(tasks))]

    workers, threads = plan_parallelism(len(pending), workers, threads)

    def finish(i: int, res: dict) -> None:
        t = tasks[i]
        folder = task_folder(study_dir, t.key)
        note = "its stored result was damaged (checksum) and was run again" if i in damaged else ""
        if res.get("ok"):
            outcomes[i] = TaskOutcome(t, folder, "done", res["summary"], note=note)
            if not keep_attempts:
                _cleanup_attempts(folder)
            progress(t.label, "done")
        else:
            outcomes[i] = TaskOutcome(t, folder, "failed", error=res.get("error"), note=note)
            if not keep_attempts:  # keep the failing attempt's log, drop older ones
                newest = max(folder.glob("attempt-*"), key=lambda p: p.stat().st_mtime, default=None)
                _cleanup_attempts(folder, keep=newest.name if newest else None)
            progress(t.label, "failed")

    # largest first: the finest levels (the long solves) start at once and the small ones fill
    # the other workers around them, so the study ends soon after its longest run
    pending.sort(key=lambda i: -tasks[i].level)
    specs = {i: tasks[i].spec(threads) for i in pending}
    folders = {i: str(task_folder(study_dir, tasks[i].key)) for i in pending}
    if scheduler:
        _run_on_dask(scheduler, specs, folders, tasks, finish, progress)
    elif workers == 1:
        for i in pending:
            progress(tasks[i].label, "running")
            finish(i, execute_task(specs[i], folders[i]))
    else:
        import multiprocessing as mp

        with ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("spawn"),
                                 initializer=_watch_parent, initargs=(os.getpid(),)) as pool:
            futs = {}
            for i in pending:
                futs[pool.submit(execute_task, specs[i], folders[i])] = i
                progress(tasks[i].label, "running")
            remaining = set(futs)
            try:
                while remaining:
                    done, remaining = wait(remaining, return_when=FIRST_COMPLETED)
                    for f in done:
                        i = futs[f]
                        try:
                            finish(i, f.result())
                        except Exception as exc:  # a worker process died
                            finish(i, {"ok": False, "error": f"worker failed: {type(exc).__name__}: {exc}"})
            except KeyboardInterrupt:
                for f in remaining:
                    f.cancel()
                raise
    return [outcomes[i] for i in range(len(tasks))]


def _run_on_dask(address: str, specs: dict, folders: dict, tasks, finish, progress) -> None:
    try:
        from distributed import Client, as_completed
    except ImportError as exc:
        raise BridgeError("a Dask scheduler was given but 'distributed' is not installed "
                          "(pip install distributed)") from exc
    try:
        client = Client(address, timeout="20s")
    except Exception as exc:
        raise BridgeError(f"cannot reach the Dask scheduler at {address}: {exc}") from None
    try:
        futs = {}
        for i, spec in specs.items():
            f = client.submit(execute_task, spec, folders[i], pure=False, key=f"modebridge-{spec['key'][:16]}-{time.time_ns()}")
            futs[f] = i
            progress(tasks[i].label, "running")
        for f in as_completed(list(futs)):
            i = futs[f]
            try:
                finish(i, f.result())
            except Exception as exc:
                finish(i, {"ok": False, "error": f"dask task failed: {type(exc).__name__}: {exc}"})
    finally:
        client.close()
