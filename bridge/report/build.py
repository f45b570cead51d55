"""Build a report: find what a path holds, gather it, draw it, write one HTML file.

A path may be

* a run folder ``OUT/`` (``modebridge run``): one section per solver folder holding
  ``result.vtkhdf``; a solver that failed (``error.txt``) is listed as such; with several
  solvers their results are compared with the first;
* one solver folder, or a result file;
* a study folder: ``convergence.json`` (``modebridge converge``) or ``variants.json``
  (``modebridge vary``), with the runs in ``runs/<key>/``;
* a verification folder (``modebridge verify``: ``verify.json``);
* a ``verify.json`` beside any of these adds the verification table.

:func:`build_comparison_report` compares two or more results (the first is the reference).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from .. import __version__
from ..checks import rigid_body_count
from ..errors import BridgeError, ExitCode
from ..io import atomic_write_text, guard_output
from ..records import read_record, resolve_path
from ..results import ModalResult, load_result
from .contents import ComparisonEntry, ConvergenceEntry, Report, ResultEntry, VariantEntry
from .html import stored_inside_modes, stored_rigid_count
from .verify import read_verification

__all__ = ["ReportError", "build_report", "build_comparison_report", "collect", "collect_comparison",
           "report_for_results", "draw", "write_report", "short_labels", "DEFAULT_MAX_MODES",
           "DEFAULT_MAX_BYTES"]

#: modes drawn per result unless told otherwise (each costs a picture and an animation)
DEFAULT_MAX_MODES = 20
#: a report is held below this size unless told otherwise (``--max-size``; 0: no cap). The rule
#: for what is left out is :func:`_fit`'s: animations first, then mode pictures, each from the
#: last result's highest mode backwards; tables, checks and charts are never left out.
DEFAULT_MAX_BYTES = 5_000_000
#: folder beside a result file where its renders are kept, by result hash (reused by the next report)
RENDER_DIR = ".renders"
RESULT_FILE = "result.vtkhdf"
VERIFY_FILE = "verify.json"


class ReportError(BridgeError):
    """The path holds nothing a report can be made of."""

    exit_code = ExitCode.REPORT


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _anchor(label: str, taken: set[str]) -> str:
    base = "r-" + (re.sub(r"[^A-Za-z0-9_-]+", "-", label).strip("-").lower()[:40] or "result")
    a, k = base, 2
    while a in taken:
        a, k = f"{base}-{k}", k + 1
    taken.add(a)
    return a


def _entry(label: str, result: ModalResult, path: Path | None, taken: set[str]) -> ResultEntry:
    return ResultEntry(label, result, path, _sha256(path) if path is not None and path.is_file() else "",
                       anchor=_anchor(label, taken))


def _result_findings(report: Report, e: ResultEntry) -> None:
    for c in e.result.metadata.get("checks") or []:
        if isinstance(c, dict) and c.get("status") in ("warn", "fail"):
            report.add(c["status"], e.label, f"{c.get('name', '')}: {c.get('message', '')}")
    warnings = (e.result.metadata.get("provenance") or {}).get("solver_warnings") or []
    if any(isinstance(c, dict) and c.get("name") == "solver_warnings" for c in e.result.metadata.get("checks") or []):
        warnings = []  # the run's solver_warnings check carries them already
    counts: dict[str, int] = {}
    for w in warnings:
        counts[str(w)] = counts.get(str(w), 0) + 1
    for w, n in counts.items():
        report.add("warn", e.label, f"solver warning: {w}" + (f" (×{n})" if n > 1 else ""))
    if not e.result.metadata.get("checks"):
        report.add("note", e.label, "the result records no checks")


def _title(results: list[ResultEntry], fallback: str) -> str:
    for e in results:
        m = e.result.metadata.get("model") or {}
        name = m.get("name") or (e.result.metadata.get("provenance") or {}).get("model_name")
        if name:
            return str(name)
    return fallback


def _new(kind: str, sources: list[str]) -> Report:
    return Report(kind=kind, title="", sources=sources,
                  created=_dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
                  modebridge_version=__version__)


def _error_text(folder: Path) -> str:
    try:
        return " ".join((folder / "error.txt").read_text(encoding="utf-8", errors="replace").split())
    except OSError:
        return "failed (error.txt unreadable)"


def _find_verify(report: Report, candidates: list[Path], explicit: Path | None) -> None:
    path = explicit
    if path is None:
        path = next((p for p in candidates if p.is_file()), None)
    if path is None:
        return
    cases, problems = read_verification(path)
    report.verification = cases
    report.verification_file = str(path)
    for p in problems:
        report.add("warn", "verification", p)
    for c in cases:
        if c.passed is False:
            bad = [m.mode for m in c.modes if m.passed is False]
            report.add("fail", "verification", f"case {c.name}: outside its tolerance"
                       + (f" at mode(s) {', '.join(bad)}" if bad else ""))


def _compare_entries(report: Report, ref: ResultEntry, others: list[ResultEntry], force: bool, thresholds) -> None:
    from ..compare.results import compare_results

    for e in others:
        try:
            rc = compare_results(ref.result, e.result, ref.label, e.label, thresholds, force=force)
        except BridgeError as exc:
            report.add("warn", "comparison", f"{ref.label} vs {e.label} not compared: {exc}")
            continue
        entry = ComparisonEntry(rc, [float(f) for f in ref.result.frequencies],
                                [float(f) for f in e.result.frequencies])
        report.comparisons.append(entry)
        _comparison_findings(report, rc)


def _comparison_findings(report: Report, rc) -> None:
    from ..compare.results import ALIAS_MAC

    where = f"{rc.label_a} vs {rc.label_b}"
    bad = [v for v in rc.pair_verdicts() if not v["ok"]]
    for v in bad:
        report.add("fail", where, f"A mode {v['a']} ↔ B mode {v['b']}: Δf {100 * v['df']:+.3f} %, "
                                  f"MAC {v['mac']:.3f} outside the thresholds")
    if rc.comparison.unpaired_a:
        report.add("fail", where, f"modes of A without a partner in B: {[i + 1 for i in rc.comparison.unpaired_a]}")
    for side, (val, i, j) in (("A", rc.auto_mac_a), ("B", rc.auto_mac_b)):
        if val > ALIAS_MAC:
            report.add("warn", where, f"auto-MAC of {side}: modes {i + 1} and {j + 1} look alike (MAC {val:.2f}): "
                                      "aliased or poorly separated")


# --- the kinds of path ------------------------------------------------------------------

def _solver_folders(out: Path) -> list[Path]:
    return sorted(p for p in out.iterdir() if p.is_dir() and not p.name.startswith(".")
                  and ((p / RESULT_FILE).is_file() or (p / "error.txt").is_file()))


def _collect_run(out: Path, folders: list[Path], force: bool, thresholds) -> Report:
    report = _new("run", [str(out)])
    taken: set[str] = set()
    for f in folders:
        if (f / RESULT_FILE).is_file():
            e = _entry(f.name, load_result(f / RESULT_FILE), f / RESULT_FILE, taken)
            report.results.append(e)
            _result_findings(report, e)
        else:
            text = _error_text(f)
            report.failed_runs.append((f.name, text))
            report.add("fail", f.name, f"the solver run failed: {text}")
    if len(report.results) > 1:
        _compare_entries(report, report.results[0], report.results[1:], force, thresholds)
    report.title = _title(report.results, out.name)
    return report


def _collect_result(path: Path) -> Report:
    file = path / RESULT_FILE if path.is_dir() else path
    report = _new("result", [str(file)])
    label = file.parent.name if file.name == RESULT_FILE else file.name
    e = _entry(label, load_result(file), file, set())
    report.results.append(e)
    _result_findings(report, e)
    report.title = _title(report.results, label)
    return report


def _run_folder(study_dir: Path, folder: str | None) -> Path | None:
    """A study run's folder, as recorded (relative to where the study ran) or under runs/."""
    if not folder:
        return None
    p = Path(folder)
    # records hold run folders relative to the study folder (bridge.records); older ones absolute
    for cand in (resolve_path(folder, study_dir), p, study_dir / "runs" / p.name):
        if (cand / RESULT_FILE).is_file():
            return cand
    return None


def _read_json(path: Path):
    """A study record's data, read and verified by :func:`bridge.records.read_record`."""
    kind = {"convergence.json": "convergence", "variants.json": "variants"}.get(path.name)
    try:
        return read_record(path, kind).data
    except BridgeError as exc:
        raise ReportError(f"unreadable study record: {' '.join(str(exc).split())}") from None


def _collect_convergence(study_dir: Path) -> Report:
    from .figures import convergence_pngs

    data = _read_json(study_dir / "convergence.json")
    studies = data if isinstance(data, list) else data.get("studies", [data]) if isinstance(data, dict) else []
    report = _new("convergence", [str(study_dir)])
    taken: set[str] = set()
    for st in studies:
        if not isinstance(st, dict):
            continue
        solver = str(st.get("solver", ""))
        entry = ConvergenceEntry(st)
        found = []
        for p in st.get("plots") or []:
            cand = [resolve_path(p, study_dir), Path(p), study_dir / Path(p).name]
            hit = next((c for c in cand if c.is_file()), None)
            if hit is not None:
                found.append(hit)
        if len(found) == 2:
            entry.plots = [(f"Frequency against element size, extrapolated value and GCI band — {solver}",
                            found[0].read_bytes()),
                           (f"Discretisation error against element size — {solver}", found[1].read_bytes())]
        else:
            try:
                a, b = convergence_pngs(st)
                entry.plots = [(f"Frequency against element size, extrapolated value and GCI band — {solver}", a),
                               (f"Discretisation error against element size — {solver}", b)]
                report.add("note", f"convergence {solver}", "plots redrawn from convergence.json "
                                                            "(the study's PNG files were not found)")
            except Exception as exc:  # a plot is not worth failing the report for
                report.add("warn", f"convergence {solver}", f"plots not drawn: {type(exc).__name__}: {exc}")
        report.convergence.append(entry)
        for m in st.get("modes", []):
            g = m.get("gci") or {}
            verdict = m.get("verdict") or (g.get("verdict") if g else "not tracked on three levels")
            if verdict != "converged":  # `converge` exits 10 on it: the report says fail alike
                report.add("fail", f"convergence {solver}", f"mode {m.get('mode')}: {verdict}"
                           + (f" ({g['note']})" if g and g.get("note") else ""))
        runs = st.get("runs") or []
        for r in runs:
            if r.get("state") == "failed":
                report.add("fail", f"convergence {solver}", f"{r.get('label', '')}: {r.get('error', '')}")
        # the finest level that finished, in full
        best, best_level = None, -1
        for r in runs:
            folder = _run_folder(study_dir, r.get("folder"))
            if folder is None or r.get("state") == "failed":
                continue
            level = r["level"] if isinstance(r.get("level"), int) else _level(folder, r.get("label", ""))
            if level > best_level:
                best, best_level = folder, level
        if best is not None:
            e = _entry(f"finest level (L{best_level}) / {solver}", load_result(best / RESULT_FILE),
                       best / RESULT_FILE, taken)
            report.results.append(e)
            _result_findings(report, e)
        else:
            report.add("warn", f"convergence {solver}", "no run folder of the study found: no mode pictures")
    report.title = _title(report.results, study_dir.name)
    return report


def _level(folder: Path, label: str) -> int:
    try:
        return int(json.loads((folder / "summary.json").read_text(encoding="utf-8"))["level"])
    except (OSError, ValueError, KeyError, TypeError):
        m = re.match(r"level (\d+)", label)
        return int(m.group(1)) if m else 0


def _collect_variants(study_dir: Path) -> Report:
    from ..compare.mapping import MappingError
    from ..compare.results import Thresholds, compare_results

    data = _read_json(study_dir / "variants.json")
    if not isinstance(data, dict):
        raise ReportError(f"{study_dir / 'variants.json'}: not a variants study")
    report = _new("variants", [str(study_dir)])
    report.baseline = data.get("baseline") if isinstance(data.get("baseline"), dict) else None
    taken: set[str] = set()
    base = None
    bfolder = _run_folder(study_dir, (report.baseline or {}).get("folder"))
    if bfolder is not None:
        base = _entry("baseline", load_result(bfolder / RESULT_FILE), bfolder / RESULT_FILE, taken)
        report.results.append(base)
        _result_findings(report, base)
    else:
        report.add("warn", "baseline", "the baseline's run folder was not found: no mode pictures")
    for v in data.get("variants") or []:
        if not isinstance(v, dict):
            continue
        entry = VariantEntry(v)
        name = str(v.get("name", ""))
        if v.get("state") not in ("done", "cached"):
            report.add("fail", f"variant {name}", f"the run failed: {v.get('error', '')}")
        if v.get("note"):
            report.add("note", f"variant {name}", str(v["note"]))
        folder = _run_folder(study_dir, v.get("folder"))
        if folder is not None:
            e = _entry(f"variant {name}", load_result(folder / RESULT_FILE), folder / RESULT_FILE, taken)
            report.results.append(e)
            _result_findings(report, e)
            if base is not None:
                try:
                    entry.comparison = compare_results(base.result, e.result, "baseline", name, Thresholds(),
                                                       force=True)
                    entry.freqs_a = [float(f) for f in base.result.frequencies]
                    entry.freqs_b = [float(f) for f in e.result.frequencies]
                except (MappingError, BridgeError) as exc:
                    report.add("note", f"variant {name}", f"MAC not computed: {exc}")
        report.variants.append(entry)
    report.title = _title(report.results, study_dir.name)
    return report


def collect(path: str | Path, verify: str | Path | None = None, force: bool = False, thresholds=None) -> Report:
    """Gather what ``path`` holds into a :class:`Report` (no pictures yet)."""
    from ..compare.results import Thresholds

    thresholds = thresholds or Thresholds()
    path = Path(path)
    if not path.exists():
        raise ReportError(f"{path}: no such file or folder")
    if path.is_file() and path.name in ("convergence.json", "variants.json"):
        path = path.parent
    candidates: list[Path]
    if path.is_file():
        report = _collect_result(path)
        candidates = [path.parent / VERIFY_FILE, path.parent.parent / VERIFY_FILE]
    elif (path / "convergence.json").is_file():
        report = _collect_convergence(path)
        candidates = [path / VERIFY_FILE]
    elif (path / "variants.json").is_file():
        report = _collect_variants(path)
        candidates = [path / VERIFY_FILE]
    elif (path / RESULT_FILE).is_file():
        report = _collect_result(path)
        candidates = [path / VERIFY_FILE, path.parent / VERIFY_FILE]
    elif (path / VERIFY_FILE).is_file() and not _solver_folders(path):
        report = _new("verification", [str(path)])
        report.title = f"Verification — {path.resolve().name}"
        candidates = [path / VERIFY_FILE]
    elif (path / "error.txt").is_file():
        raise ReportError(f"{path}: this solver run failed ({_error_text(path)})")
    else:
        folders = _solver_folders(path)
        if not folders:
            raise ReportError(f"{path}: not a run folder, solver folder, result file or study folder "
                              f"(no {RESULT_FILE}, convergence.json or variants.json found)")
        report = _collect_run(path, folders, force, thresholds)
        candidates = [path / VERIFY_FILE]
    _find_verify(report, candidates, Path(verify) if verify is not None else None)
    return report


def collect_comparison(paths: list[str | Path], verify: str | Path | None = None, force: bool = False,
                       thresholds=None) -> Report:
    """Gather two or more results (files or solver folders), the first the reference, and compare."""
    from ..compare.results import Thresholds

    thresholds = thresholds or Thresholds()
    if len(paths) < 2:
        raise ReportError("a comparison needs at least two results")
    report = _new("comparison", [str(p) for p in paths])
    taken: set[str] = set()
    files = [Path(p) / RESULT_FILE if Path(p).is_dir() else Path(p) for p in paths]
    for label, file in zip(short_labels(files), files):
        e = _entry(label, load_result(file), file, taken)
        report.results.append(e)
        _result_findings(report, e)
    ref = report.results[0]
    from ..compare.results import compare_results

    for e in report.results[1:]:
        rc = compare_results(ref.result, e.result, ref.label, e.label, thresholds, force=force)
        report.comparisons.append(ComparisonEntry(rc, [float(f) for f in ref.result.frequencies],
                                                  [float(f) for f in e.result.frequencies]))
        _comparison_findings(report, rc)
    report.title = "Comparison: " + _title(report.results, "results")
    if verify is not None:
        _find_verify(report, [], Path(verify))
    return report


def short_labels(files: list[Path]) -> list[str]:
    """The shortest distinct path tails naming each result (``a/calculix``, ``b/calculix``); the
    file name ``result.vtkhdf`` is left out, being the same everywhere."""
    parts = [(f.parent if f.name == RESULT_FILE else f).resolve().parts for f in files]
    longest = max((len(p) for p in parts), default=1)
    for k in range(1, longest + 1):
        tails = ["/".join(p[-k:]) for p in parts]
        if len(set(tails)) == len(tails):
            return tails
    return [str(f) for f in files]


def report_for_results(results: list[tuple[str, ModalResult]], kind: str = "result") -> Report:
    """A report of results held in memory (no files): for tests and for library users."""
    report = _new(kind, [label for label, _ in results])
    taken: set[str] = set()
    for label, r in results:
        e = _entry(label, r, None, taken)
        report.results.append(e)
        _result_findings(report, e)
    report.title = _title(report.results, "result")
    return report


# --- drawing and writing ------------------------------------------------------------------

def draw(report: Report, max_modes: int = DEFAULT_MAX_MODES, pictures: bool = True, animations: bool = True,
         max_bytes: int = DEFAULT_MAX_BYTES, workers: int | None = None) -> dict[str, bytes]:
    """Draw the mode pictures, animations, model pictures, MAC heat maps and frequency maps into
    ``report``; returns the frequency maps by result anchor. A drawing that fails is a finding,
    not an error. Renders of a result read from a file are kept beside it (:data:`RENDER_DIR`,
    by the file's hash) and reused; missing ones are drawn in parallel on the free cores
    (``workers``: this many processes; default: the free cores). ``max_bytes`` caps the page (:func:`_fit`)."""
    from .figures import frequency_map_png, mac_heatmap_png

    for e in report.results:
        e.pictured_modes = min(e.result.n_modes, max(0, int(max_modes))) if pictures else 0
    # the mode renders start first, in worker processes where cores are free; the charts and the
    # model picture are drawn here meanwhile (matplotlib's import and the model picture overlap
    # the renders instead of following them)
    pending = _start_renders(report, [e for e in report.results if e.pictured_modes], animations, workers) \
        if pictures else None
    try:
        maps: dict[str, bytes] = {}
        for c in report.comparisons:
            rc = c.comparison
            try:
                # axes say A and B (labels may be long paths); the caption names them
                pairs = [(p.a, p.b) for p in rc.comparison.pairs]
                c.heatmap = _chart(report, "mac", [_digest(rc.comparison.mac), c.freqs_a, c.freqs_b, pairs, "A", "B"],
                                   lambda: mac_heatmap_png(rc.comparison.mac, c.freqs_a, c.freqs_b, pairs, "A", "B"))
            except Exception as exc:  # noqa: BLE001 - reported, the rest of the report stands
                report.add("warn", "report", f"MAC heat map not drawn: {type(exc).__name__}: {exc}")
        for v in report.variants:
            rc = v.comparison
            if rc is None:
                continue
            try:
                pairs = [(p.a, p.b) for p in rc.comparison.pairs]
                v.heatmap = _chart(report, "mac", [_digest(rc.comparison.mac), v.freqs_a, v.freqs_b, pairs, "baseline",
                                                   rc.label_b],
                                   lambda: mac_heatmap_png(rc.comparison.mac, v.freqs_a, v.freqs_b, pairs, "baseline",
                                                           rc.label_b))
            except Exception as exc:  # noqa: BLE001
                report.add("warn", "report", f"MAC heat map of variant {v.data.get('name', '')} not drawn: "
                                             f"{type(exc).__name__}: {exc}")
        for e in report.results:
            model = e.result.metadata.get("model") or {}
            bands = [b for b in model.get("excitation") or [] if isinstance(b, dict)]
            if bands and e.result.n_modes:
                try:
                    rigid = stored_rigid_count(e.result)
                    inside = stored_inside_modes(e.result)
                    maps[e.anchor] = _chart(report, "freqmap", [e.result.frequencies.tolist(), rigid, bands,
                                                                sorted(inside) if inside is not None else None],
                                            lambda: frequency_map_png(e.result.frequencies, rigid, bands, inside))
                except Exception as exc:  # noqa: BLE001
                    report.add("warn", e.label, f"frequency map not drawn: {type(exc).__name__}: {exc}")
        if pictures:
            _model_pictures(report)
    finally:
        if pending is not None:
            _finish_renders(report, pending, animations)
    report.size_cap = int(max_bytes or 0)
    if max_bytes:
        _fit(report, maps, int(max_bytes))
    return maps


# --- renders: cached by result hash, drawn in parallel where cores are free ------------------

#: bump when a chart's drawing changes, so cached charts are redrawn
_CHART_VERSION = 2


def _digest(a) -> str:
    import numpy as np

    return hashlib.sha256(np.ascontiguousarray(np.asarray(a, float)).tobytes()).hexdigest()


def _chart(report: Report, kind: str, data, draw_png) -> bytes:
    """A chart drawn once per distinct data and kept in the report's cache folder (matplotlib is
    not imported when every chart is there)."""
    if report.cache_dir is None:
        return draw_png()
    key = hashlib.sha256(json.dumps([kind, _CHART_VERSION, data], sort_keys=True, default=str).encode()).hexdigest()
    path = report.cache_dir / f"{kind}-{key[:24]}.png"
    if path.is_file():
        return path.read_bytes()
    png = draw_png()
    _keep((path, path.with_suffix(".unused")), png, None)
    return png


def _render_key(e: ResultEntry, animate: bool) -> str | None:
    if not e.sha256 or e.path is None:
        return None
    from .render import RENDER_VERSION

    return hashlib.sha256(f"{e.sha256}|{RENDER_VERSION}|{int(animate)}".encode()).hexdigest()[:24]


def _render_files(e: ResultEntry, key: str, mode: int) -> tuple[Path, Path]:
    d = Path(e.path).parent / RENDER_DIR
    return d / f"{key}-m{mode}.png", d / f"{key}-m{mode}.gif"


def free_workers(workers: int | None = None) -> int:
    """Processes for drawing: ``workers`` when given, else the cores not busy now, at least 1.

    Busy cores are the fewer of the 1-minute load average and the processes running at this
    moment besides this one (``/proc/loadavg``): the average alone still counts a solve that
    ended seconds ago (right after ``run`` it says one core is busy when both are free)."""
    if workers:
        return max(1, int(workers))
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)
    try:
        busy = int(os.getloadavg()[0] + 0.5)
    except (AttributeError, OSError):
        busy = 0
    try:
        with open("/proc/loadavg", encoding="ascii") as fh:
            running = int(fh.read().split()[3].split("/")[0]) - 1  # this process is one of them
        busy = min(busy, max(running, 0))
    except (OSError, ValueError, IndexError):
        pass
    return max(1, cores - busy)


@dataclass
class _Pending:
    """Renders under way: the tasks (result, 0-based mode) shared by this process and the drawing
    processes started, the counter they take tasks by and the pipes they send renders back on."""

    entries: list[ResultEntry]
    jobs: list[tuple]
    tasks: list[tuple[int, int]]
    counter: object = None
    procs: list = field(default_factory=list)
    pipes: list = field(default_factory=list)


def _start_renders(report: Report, entries: list[ResultEntry], animate: bool, workers: int | None) -> _Pending | None:
    """Take the renders kept beside each result; list the missing ones as tasks and, with more
    than one free core, start drawing processes that take them one at a time (this process joins
    them in :func:`_finish_renders`, after the charts and the model picture).

    One task per mode taken from a shared counter, not a fixed share per process: a spawned
    process pays 0.6-0.8 s (interpreter, numpy, VTK, first render) before its first picture, this
    process meanwhile draws the charts, so neither can be told its share in advance."""
    jobs: list[tuple] = []
    tasks: list[tuple[int, int]] = []
    drawn: list[ResultEntry] = []
    for e in entries:
        key = _render_key(e, animate)
        missing = []
        for mode in range(1, e.pictured_modes + 1):
            if key is not None:
                png, gif = _render_files(e, key, mode)
                if png.is_file() and (not animate or gif.is_file()):
                    e.pictures[mode] = png.read_bytes()
                    if animate:
                        e.animations[mode] = gif.read_bytes()
                    continue
            missing.append(mode - 1)
        if missing:
            tasks += [(len(jobs), m) for m in missing]
            jobs.append((e.result.points, e.result.cells, e.result.cell_type, e.result.shapes, missing))
            drawn.append(e)
    if not tasks:
        return None  # everything cached: VTK is not even imported
    pending = _Pending(drawn, jobs, tasks)
    extra = min(free_workers(workers) - 1, len(tasks) - 1)  # this process draws too
    if extra > 0:
        import multiprocessing as mp

        from . import render

        # spawn: a fresh interpreter per process, so no VTK/EGL state is inherited
        ctx = mp.get_context("spawn")
        pending.counter = ctx.Value("i", 0)
        try:
            for _ in range(extra):
                # one pipe per process, its sending end closed here: a process that dies, even
                # in the middle of a message, ends its pipe instead of leaving the reader waiting
                recv, send = ctx.Pipe(duplex=False)
                p = ctx.Process(target=render._worker, args=(jobs, tasks, pending.counter, send, animate),
                                daemon=True, name="modebridge-render")
                p.start()
                send.close()
                pending.procs.append(p)
                pending.pipes.append(recv)
        except BaseException:
            _stop(pending)
            for c in pending.pipes:
                c.close()
            raise
    return pending


def _stop(pending: _Pending) -> None:
    """End the drawing processes (their pipes then end, and :func:`_receive` with them)."""
    for p in pending.procs:
        if p.is_alive():
            p.terminate()
        p.join(5)


def _receive(pending: _Pending, outcomes: dict) -> None:
    """Runs in a thread of this process while it draws: takes what the drawing processes send
    (so they never wait for this process to be free) until every pipe has ended."""
    from multiprocessing.connection import wait

    live = list(pending.pipes)
    while live:
        try:
            ready = wait(live)
        except (OSError, ValueError):  # closed under it: the report is finishing
            return
        for c in ready:
            try:
                k, res = c.recv()
            except (EOFError, OSError, ValueError):  # the process is done (or died)
                live.remove(c)
                continue
            outcomes[k] = res


def _finish_renders(report: Report, pending: _Pending, animate: bool) -> None:
    """Draw the tasks left in this process alongside the drawing processes, collect theirs (a task
    a process claimed but never returned, e.g. it died, is drawn here), keep the renders beside
    their results; a result whose renders failed gets one warning."""
    import threading

    from . import render

    n = len(pending.tasks)
    outcomes: dict[int, object] = {}

    def put(k: int, res) -> None:
        outcomes[k] = (res.mode, res.picture, res.animation) if isinstance(res, render.ModeImages) else res

    try:
        if pending.counter is not None:
            receiver = threading.Thread(target=_receive, args=(pending, outcomes), daemon=True)
            receiver.start()
            render.draw_tasks(pending.jobs, pending.tasks, lambda: render.take(pending.counter, n), put, animate)
            while receiver.is_alive() and len(outcomes) < n:  # the tasks the processes still draw
                receiver.join(0.05)
            _stop(pending)  # a process still starting has nothing left to take
            receiver.join(5)
        left = iter([k for k in range(n) if k not in outcomes])  # claimed by a process that died
        render.draw_tasks(pending.jobs, pending.tasks, lambda: next(left, None), put, animate)
    finally:
        _stop(pending)
        for c in pending.pipes:
            c.close()
    warned: set[str] = set()
    for k in range(n):
        j, mode0 = pending.tasks[k]
        e, res = pending.entries[j], outcomes.get(k)
        if res is None:
            continue
        if not isinstance(res, tuple):  # an exception, or its line from a drawing process
            if e.label not in warned:
                text = res if isinstance(res, str) else f"{type(res).__name__}: {' '.join(str(res).split())}"
                report.add("warn", e.label, f"mode pictures not drawn: {text}")
                warned.add(e.label)
            continue
        mode, picture, animation = res
        key = _render_key(e, animate)
        e.pictures[mode] = picture
        if animate:
            e.animations[mode] = animation
        if key is not None:
            _keep(_render_files(e, key, mode), picture, animation if animate else None)


def _keep(files: tuple[Path, Path], picture: bytes, animation: bytes | None) -> None:
    """Store renders beside the result; a folder we may not write only costs the next report time."""
    from ..io import atomic_path

    try:
        files[0].parent.mkdir(exist_ok=True)
        for path, data in zip(files, (picture, animation)):
            if data is not None:
                with atomic_path(path) as tmp:
                    Path(tmp).write_bytes(data)
    except OSError:
        pass


def _model_pictures(report: Report) -> None:
    """The mesh with supports and masses marked, once per distinct mesh + marks (cached like renders)."""
    seen: dict[str, bytes] = {}
    for e in report.results:
        marks = e.result.metadata.get("marks")
        if not isinstance(marks, dict):
            continue
        sig = hashlib.sha256(json.dumps([e.result.points.shape, e.result.cells.shape, marks], sort_keys=True,
                                        default=str).encode()
                             + e.result.points.tobytes()[:4096]).hexdigest()[:24]
        if sig in seen:
            e.model_picture = seen[sig]
            continue
        cached = Path(e.path).parent / RENDER_DIR / f"model-{sig}.png" if e.path is not None else None
        if cached is not None and cached.is_file():
            e.model_picture = seen[sig] = cached.read_bytes()
            continue
        try:
            import numpy as np

            from .render import render_model

            png = render_model(e.result.points, e.result.cells, e.result.cell_type,
                               np.asarray(marks.get("supported_nodes") or [], np.int64),
                               [(int(n), float(kg)) for n, kg in marks.get("point_masses") or []],
                               beams=np.asarray(marks.get("beams") or [], np.int64).reshape(-1, 2),
                               springs=[tuple(s) for s in marks.get("springs") or []],
                               couplings=[tuple(c) for c in marks.get("couplings") or []])
        except Exception as exc:  # noqa: BLE001
            report.add("warn", e.label, f"model picture not drawn: {type(exc).__name__}: {exc}")
            continue
        e.model_picture = seen[sig] = png
        if cached is not None:
            _keep((cached, cached.with_suffix(".unused")), png, None)


def _b64(n: int) -> int:
    return 4 * ((n + 2) // 3)


def _fit(report: Report, maps: dict[str, bytes], cap: int) -> None:
    """Hold the page below ``cap`` bytes: leave out animations, then mode pictures, each from the
    last result's highest mode backwards, until the page fits; say what was left out."""
    from .html import render_page

    total = len(render_page(report, maps).encode("utf-8"))
    room = cap - 4_000  # the notes about what was left out take a few hundred bytes
    if total <= cap:
        return
    for kind in ("animations", "pictures"):
        for e in reversed(report.results):
            store = getattr(e, kind)
            for mode in sorted(store, reverse=True):
                if total <= room:
                    break
                if kind == "pictures" and mode == 1:
                    continue  # every result keeps the picture of its first mode
                total -= _b64(len(store.pop(mode))) + 120  # the data URI and its <img> tag
                getattr(e, f"left_out_{kind}").append(mode)
    out_a = sum(len(e.left_out_animations) for e in report.results)
    out_p = sum(len(e.left_out_pictures) for e in report.results)
    report.add("note", "report", f"size cap {cap / 1e6:.1f} MB: {out_a} animation(s) and {out_p} mode picture(s) "
                                 "left out (animations first, then pictures, from the last result's highest "
                                 "mode backwards; tables and charts are kept); --max-size 0 keeps them all")


def write_report(report: Report, out: str | Path, freq_maps: dict[str, bytes] | None = None) -> Path:
    from .html import render_page

    out = Path(out)
    guard_output(out, [Path(s) for s in report.sources], what="report")  # never onto a result or model
    if out.suffix.lower() == ".pdf":
        from .pdf import write_pdf

        return write_pdf(report, out, freq_maps)
    atomic_write_text(out, render_page(report, freq_maps))
    return out


def _default_out(path: Path) -> Path:
    if path.is_file():
        return path.parent / "report.html"
    return path / "report.html"


def build_report(path: str | Path, out: str | Path | None = None, verify: str | Path | None = None,
                 max_modes: int = DEFAULT_MAX_MODES, pictures: bool = True, force: bool = False,
                 thresholds=None, animations: bool = True, max_bytes: int = DEFAULT_MAX_BYTES,
                 workers: int | None = None) -> Path:
    """Write the report of ``path`` (default: ``report.html`` in it, or beside a file); an
    ``out`` ending in ``.pdf`` writes a PDF (:mod:`bridge.report.pdf`)."""
    report = collect(path, verify, force, thresholds)
    p = Path(path)
    report.cache_dir = (p if p.is_dir() else p.parent) / RENDER_DIR
    maps = draw(report, max_modes, pictures, animations, max_bytes, workers)
    return write_report(report, Path(out) if out is not None else _default_out(p), maps)


def build_comparison_report(paths: list[str | Path], out: str | Path | None = None,
                            verify: str | Path | None = None, max_modes: int = DEFAULT_MAX_MODES,
                            pictures: bool = True, force: bool = False, thresholds=None,
                            animations: bool = True, max_bytes: int = DEFAULT_MAX_BYTES,
                            workers: int | None = None) -> Path:
    """Write the comparison report of ``paths`` (default: ``comparison-report.html`` here)."""
    report = collect_comparison(paths, verify, force, thresholds)
    maps = draw(report, max_modes, pictures, animations, max_bytes, workers)
    return write_report(report, Path(out) if out is not None else Path("comparison-report.html"), maps)
