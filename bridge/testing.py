"""The contract kit: checks a solver plugin's own tests call to show that it keeps the contract.

A plugin's test suite calls :func:`assert_contract` (or the single checks) with its adapter and a
scratch folder::

    from bridge.testing import assert_contract

    def test_my_solver_keeps_the_contract(tmp_path):
        assert_contract(MySolverAdapter(), tmp_path)

Each check returns a list of failures (one line each, naming the plugin, the capability and what
went wrong); :func:`assert_contract` runs them all and raises :class:`ContractError` listing every
failure. The checks:

* :func:`check_declarations` — name, label, capabilities: families known to the element registry,
  support kinds the model knows, substitutes that point at declared families of the same section
  kind, options with a type, a valid default and help text.
* :func:`check_node_orders` — every declared family has the plugin's gmsh → solver node order
  registered in the element registry (:func:`bridge.elements.register_node_order`).
* :func:`check_decks` — a deck is written for every declared family, support kind and option
  value (on a tiny model); a family the plugin does *not* declare is refused with a
  :class:`~bridge.errors.BridgeError`, not written.
* :func:`check_errors` — errors carry documented exit codes (:data:`bridge.errors.EXIT_CODES`):
  reading results from an empty folder raises a ``BridgeError``, not another exception.
* :func:`check_runs` — tiny models with known answers run through the core pipeline (the
  core's post-conditions and checks included) on every declared family, support kind and
  option value: frequencies within :data:`FREQUENCY_TOLERANCE` of the analytic values, mode
  shapes with MAC ≥ :data:`MIN_MAC` against the analytic shapes, and the first mode's φᵀMφ = 1
  within :data:`MASS_TOLERANCE` with the core's own consistent mass matrix. These need the solver
  installed; without it they report one failure saying so.

The tiny models (:func:`tiny_models`): a simply supported rectangular steel plate (Navier's exact
solution of Kirchhoff plate theory) for shell families, also pinned, held by ``fixed_dofs``, and as
a half plate with a symmetry plane; a clamped square plate (Leissa 1969, λ² = 35.99 from memory)
for ``clamped``; and for solid families a bar fixed at one end whose cross-section points may move
only along the bar (``fixed_dofs`` uy uz everywhere, ν = 0): exact axial modes
f = (2n − 1) c / (4L), c = √(E/ρ).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from .elements import family_names, get_family
from .errors import EXIT_CODES, BridgeError
from .model import NAME_PATTERN, SUPPORT_KINDS, parse_model
from .solver import Capabilities, RunRecord

__all__ = ["ContractError", "TinyModel", "tiny_models", "check_declarations", "check_node_orders", "check_decks",
           "check_errors", "check_runs", "assert_contract", "FREQUENCY_TOLERANCE", "MIN_MAC", "MASS_TOLERANCE"]

#: a tiny model's frequencies against the analytic ones: a sanity bound for coarse meshes of any
#: element formulation, not a verification (common practice, no source)
FREQUENCY_TOLERANCE = 0.05
#: a mode shape against the analytic one (Allemang & Brown 1982's MAC; common practice, no source)
MIN_MAC = 0.95
#: the first mode's φᵀMφ with modebridge's consistent mass matrix against 1, as the run's
#: ``mass_normalisation`` check allows (common practice, no source). Only the first, smoothest
#: mode: an element with a lumped mass (CalculiX's S4, C3D8I) differs from the consistent one by
#: about (kh)², 12 % on the tiny models' fourth modes
MASS_TOLERANCE = 0.10

_E, _NU, _RHO = 210e9, 0.3, 7850.0  # steel, SI
_A, _B, _T = 0.150, 0.100, 0.002  # plate, m
_L, _W = 0.100, 0.010  # bar, m


class ContractError(AssertionError):
    """A plugin breaks the contract; the message lists every failure, one per line."""


@dataclass
class TinyModel:
    """A small model with a known answer."""

    name: str
    section: str  #: "shell" or "solid"
    supports: tuple[str, ...]  #: support kinds it uses
    raw: Callable[[str], dict]  #: family -> raw model dict
    frequencies: np.ndarray  #: Hz, the analytic values of the first modes
    shapes: Callable[[np.ndarray], np.ndarray] | None  #: points (n, 3) -> (modes, n) analytic component
    component: int  #: which translation the analytic shapes give (0 ux, 2 uz)
    source: str
    families: tuple[str, ...] = ()  #: run on these families only (empty: every declared one of its section)
    note: dict = field(default_factory=dict)


def _materials() -> dict:
    return {"steel": {"youngs_modulus": f"{_E / 1e9:g} GPa", "poisson_ratio": _NU, "density": f"{_RHO:g} kg/m^3"}}


def _plate_raw(family: str, supports: list[dict], regions: dict, length=_A, width=_B, divisions=(16, 12),
               modes=4) -> dict:
    return {"name": "contract plate", "geometry": {"kind": "plate", "length": f"{length * 1e3:g} mm",
                                                   "width": f"{width * 1e3:g} mm"},
            "materials": _materials(), "section": {"kind": "shell", "material": "steel", "thickness": f"{_T * 1e3:g} mm"},
            "regions": regions, "supports": supports, "analysis": {"modes": modes},
            "mesh": {"family": family, "divisions": list(divisions)}}


def _navier(pairs, a=_A, b=_B) -> np.ndarray:
    """Navier: f_mn = (π/2) ((m/a)² + (n/b)²) √(D/(ρh)), D = E h³ / (12 (1 − ν²)) (exact, Kirchhoff)."""
    D = _E * _T**3 / (12 * (1 - _NU**2))
    return np.array([math.pi / 2 * ((m / a) ** 2 + (n / b) ** 2) * math.sqrt(D / (_RHO * _T)) for m, n in pairs])


def _navier_shapes(pairs, a=_A, b=_B):
    def shapes(p):
        return np.stack([np.sin(m * math.pi * p[:, 0] / a) * np.sin(n * math.pi * p[:, 1] / b) for m, n in pairs])
    return shapes


# (m, n) in ascending order for a 150 × 100 mm plate: (1,1) (2,1) (1,2) (3,1)
_PAIRS = [(1, 1), (2, 1), (1, 2), (3, 1)]
_RIM = {"rim": {"select": "sides", "sides": ["xmin", "xmax", "ymin", "ymax"]}}


def _bar_raw(family: str, end: dict) -> dict:
    # the bar's points may move only along it (uy = uz = 0 everywhere) and ν = 0: a 1-D bar exactly
    return {"name": "contract bar", "geometry": {"kind": "block", "length": f"{_L * 1e3:g} mm",
                                                 "width": f"{_W * 1e3:g} mm", "height": f"{_W * 1e3:g} mm"},
            "materials": {"steel": dict(_materials()["steel"], poisson_ratio=0.0)},
            "section": {"kind": "solid", "material": "steel"},
            "regions": {"root": {"select": "sides", "sides": ["xmin"]},
                        "body": {"select": "box", "min": ["-1 mm", "-1 mm", "-1 mm"],
                                 "max": [f"{_L * 1e3 + 1:g} mm", f"{_W * 1e3 + 1:g} mm", f"{_W * 1e3 + 1:g} mm"],
                                 "entity": "volume"}},
            "supports": [dict(end, region="root"), {"region": "body", "kind": "fixed_dofs", "dofs": ["uy", "uz"]}],
            "analysis": {"modes": 3}, "mesh": {"family": family, "divisions": [20, 2, 2]}}


def _bar_frequencies() -> np.ndarray:
    c = math.sqrt(_E / _RHO)
    return np.array([(2 * n - 1) * c / (4 * _L) for n in (1, 2, 3)])


def _bar_shapes(p):
    return np.stack([np.sin((2 * n - 1) * math.pi * p[:, 0] / (2 * _L)) for n in (1, 2, 3)])


def tiny_models() -> list[TinyModel]:
    ss = [{"region": "rim", "kind": "simply_supported"}]
    half_pairs = [(1, 1), (1, 2), (3, 1), (3, 2)]  # the full plate's modes symmetric about x = a/2
    half_regions = {"edges": {"select": "sides", "sides": ["xmin", "ymin", "ymax"]},
                    "mirror": {"select": "sides", "sides": ["xmax"]}}
    navier = "Navier's exact solution of Kirchhoff plate theory (Timoshenko & Woinowsky-Krieger 1959, from memory)"
    bar = "exact axial modes of a fixed-free bar, f = (2n - 1) c / (4L) (Blevins 1979, from memory)"
    return [
        TinyModel("plate_simply_supported", "shell", ("simply_supported",),
                  lambda fam: _plate_raw(fam, ss, _RIM), _navier(_PAIRS), _navier_shapes(_PAIRS), 2, navier),
        TinyModel("plate_pinned", "shell", ("pinned",),
                  lambda fam: _plate_raw(fam, [{"region": "rim", "kind": "pinned"}], _RIM),
                  _navier(_PAIRS), _navier_shapes(_PAIRS), 2, navier),
        TinyModel("plate_fixed_dofs", "shell", ("fixed_dofs",),
                  lambda fam: _plate_raw(fam, [{"region": "rim", "kind": "fixed_dofs", "dofs": ["ux", "uy", "uz"]}], _RIM),
                  _navier(_PAIRS), _navier_shapes(_PAIRS), 2, navier),
        TinyModel("half_plate_symmetry", "shell", ("pinned", "symmetry"),
                  lambda fam: _plate_raw(fam, [{"region": "edges", "kind": "pinned"},
                                               {"region": "mirror", "kind": "symmetry", "normal": "x"}],
                                         half_regions, length=_A / 2, divisions=(8, 12)),
                  _navier(half_pairs), _navier_shapes(half_pairs), 2, navier + "; the modes symmetric about x = a/2"),
        TinyModel("plate_clamped", "shell", ("clamped",),
                  lambda fam: _plate_raw(fam, [{"region": "rim", "kind": "clamped"}], _RIM, length=0.1, width=0.1,
                                         divisions=(10, 10), modes=1),
                  # λ² = 35.99 for the fundamental (Leissa, NASA SP-160, 1969, from memory)
                  np.array([35.99 / (2 * math.pi * 0.1**2) * math.sqrt(_E * _T**3 / (12 * (1 - _NU**2)) / (_RHO * _T))]),
                  None, 2, "Leissa, Vibration of Plates, NASA SP-160 (1969), λ² = 35.99 (from memory)"),
        TinyModel("bar_clamped", "solid", ("clamped", "fixed_dofs"),
                  lambda fam: _bar_raw(fam, {"kind": "clamped"}), _bar_frequencies(), _bar_shapes, 0, bar),
        TinyModel("bar_pinned", "solid", ("pinned", "fixed_dofs"),
                  lambda fam: _bar_raw(fam, {"kind": "pinned"}), _bar_frequencies(), _bar_shapes, 0, bar),
        TinyModel("bar_symmetry", "solid", ("symmetry", "fixed_dofs"),
                  lambda fam: _bar_raw(fam, {"kind": "symmetry", "normal": "x"}), _bar_frequencies(), _bar_shapes, 0,
                  bar + "; a symmetry plane at the root holds ux there, as a fixed end does"),
    ]


# --- checks ----------------------------------------------------------------------------------

def check_declarations(adapter) -> list[str]:
    import re

    out: list[str] = []
    name = getattr(adapter, "name", None)
    who = f"plugin '{name}'"
    if not isinstance(name, str) or not re.match(NAME_PATTERN, name):
        out.append(f"{who}: name must match {NAME_PATTERN}")
    if not isinstance(getattr(adapter, "label", None), str) or not adapter.label:
        out.append(f"{who}: label must be a non-empty string")
    for meth in ("locate", "version", "write_deck", "run", "read_results"):
        if not callable(getattr(adapter, meth, None)):
            out.append(f"{who}: has no method {meth}()")
    cap = getattr(adapter, "capabilities", None)
    if not isinstance(cap, Capabilities):
        return out + [f"{who}: capabilities must be a bridge.solver.Capabilities"]
    for fam in sorted(set(cap.families) - set(family_names())):
        out.append(f"{who}: declares family '{fam}', unknown to the element registry (bridge.elements)")
    for kind in sorted(set(cap.supports) - set(SUPPORT_KINDS)):
        out.append(f"{who}: declares support kind '{kind}', which no model can name ({', '.join(SUPPORT_KINDS)})")
    for fam, sub in cap.substitutes.items():
        if fam in cap.families:
            out.append(f"{who}: substitute for '{fam}', which it declares itself")
        if sub.family not in cap.families:
            out.append(f"{who}: substitute for '{fam}' is '{sub.family}', a family it does not declare")
        elif fam in family_names() and get_family(sub.family).section_kind != get_family(fam).section_kind:
            out.append(f"{who}: substitute for '{fam}' is '{sub.family}', of another section kind")
        if not sub.size_factor > 0 or not sub.reason:
            out.append(f"{who}: substitute for '{fam}' needs a positive size factor and a reason")
    names = set()
    for o in cap.options:
        if not re.match(r"^[a-z][a-z0-9_]{0,47}$", o.name) or o.name in names:
            out.append(f"{who}: option name '{o.name}' is not lower_case or is declared twice")
        names.add(o.name)
        if o.type not in (str, int, float, bool):
            out.append(f"{who}: option '{o.name}' has type {o.type!r}; use str, int, float or bool")
        elif not isinstance(o.default, o.type) or (o.type is int and isinstance(o.default, bool)):
            out.append(f"{who}: option '{o.name}' default {o.default!r} is not a {o.type.__name__}")
        if o.choices is not None and o.default not in o.choices:
            out.append(f"{who}: option '{o.name}' default {o.default!r} is not among its choices")
        if not o.help:
            out.append(f"{who}: option '{o.name}' has no help text")
        for fam in o.applies_to:
            if fam not in cap.families:
                out.append(f"{who}: option '{o.name}' applies to '{fam}', a family it does not declare")
    return out


def check_node_orders(adapter) -> list[str]:
    """Every declared family has the plugin's gmsh -> solver node order in the element registry
    (whether the order is right shows in the runs: a wrong one fails them)."""
    cap = adapter.capabilities
    out = []
    for fam in sorted(set(cap.families) & set(family_names())):
        if adapter.name not in get_family(fam).node_orders:
            out.append(f"plugin '{adapter.name}': declares family '{fam}' but registered no node order for it: "
                       f"call bridge.elements.register_node_order('{fam}', '{adapter.name}', order) when the "
                       "plugin is imported (the identity order too)")
    return out


def _job_for(adapter, raw: dict, options: dict | None = None):
    from .pipeline import make_job, prepare
    from .selection import solver_options

    model = parse_model(raw, source="contract model")
    prep = prepare(model)
    opts = solver_options(model, adapter)
    opts.update(options or {})
    return prep, make_job(prep, options=opts)


def _model_for(section: str, family: str, kinds) -> TinyModel | None:
    for tm in tiny_models():
        if tm.section == section and set(tm.supports) <= set(kinds):
            return tm
    return None


def _option_values(o) -> list:
    if o.choices is not None:
        return [c for c in o.choices if c != o.default]
    if o.type is bool:
        return [not o.default]
    return []


def _short(exc: BaseException) -> str:
    return f"{type(exc).__name__}: {' '.join(str(exc).split())}"[:300]


def check_decks(adapter, workdir: str | Path) -> list[str]:
    """A deck for every declared family, support kind and option value; undeclared families refused."""
    out: list[str] = []
    cap = adapter.capabilities
    who = f"plugin '{adapter.name}'"
    workdir = Path(workdir)
    n = 0

    def write(label: str, raw: dict, options: dict | None = None, expect_ok: bool = True) -> None:
        nonlocal n
        n += 1
        folder = workdir / f"deck-{n:03d}"
        folder.mkdir(parents=True, exist_ok=True)
        try:
            _, job = _job_for(adapter, raw, options)
        except BridgeError as exc:
            out.append(f"{who}: {label}: the core could not prepare the tiny model: {_short(exc)}")
            return
        try:
            path = adapter.write_deck(job, folder)
        except BridgeError as exc:
            if expect_ok:
                out.append(f"{who}: declares {label} but write_deck refused it: {_short(exc)}")
            elif exc.exit_code not in EXIT_CODES:
                out.append(f"{who}: refused {label} with exit code {exc.exit_code}, not in bridge.errors.EXIT_CODES")
            return
        except Exception as exc:  # not a BridgeError: the user would see a traceback
            out.append(f"{who}: write_deck for {label} raised {_short(exc)}; raise a BridgeError subclass "
                       "(DeckWriteError) instead")
            return
        if not expect_ok:
            out.append(f"{who}: write_deck accepted {label}, which it does not declare: declare it, or refuse it "
                       "with DeckWriteError")
            return
        p = Path(path) if path is not None else None
        if p is None or not p.is_file() or p.stat().st_size == 0:
            out.append(f"{who}: write_deck for {label} returned {path!r}, not a written file")
        elif folder.resolve() not in p.resolve().parents:
            out.append(f"{who}: write_deck for {label} wrote {p} outside its work folder")

    for fam in sorted(cap.families):
        section = get_family(fam).section_kind
        tm = _model_for(section, fam, cap.supports)
        if tm is None:
            out.append(f"{who}: no tiny model fits its support kinds for a {section} family ({fam})")
            continue
        write(f"family '{fam}'", tm.raw(fam))
    for kind in sorted(cap.supports):
        for tm in tiny_models():
            fams = [f for f in sorted(cap.families) if get_family(f).section_kind == tm.section]
            if kind in tm.supports and set(tm.supports) <= set(cap.supports) and fams:
                write(f"support kind '{kind}' (on {tm.name}, {fams[0]})", tm.raw(fams[0]))
                break
    for o in cap.options:
        fams = [f for f in (o.applies_to or sorted(cap.families)) if f in cap.families]
        for fam in fams[:1]:
            tm = _model_for(get_family(fam).section_kind, fam, cap.supports)
            for v in _option_values(o) if tm else []:
                write(f"option {o.name} = {v!r} (on {fam})", tm.raw(fam), {o.name: v})
    for fam in family_names():
        if fam in cap.families:
            continue
        tm = _model_for(get_family(fam).section_kind, fam, SUPPORT_KINDS)
        if tm is not None:
            write(f"family '{fam}'", tm.raw(fam), expect_ok=False)
    return out


def check_errors(adapter, workdir: str | Path) -> list[str]:
    """Errors a user can meet carry documented exit codes."""
    out: list[str] = []
    who = f"plugin '{adapter.name}'"
    cap = adapter.capabilities
    fam = sorted(cap.families)[0] if cap.families else None
    tm = _model_for(get_family(fam).section_kind, fam, cap.supports) if fam else None
    if tm is None:
        return [f"{who}: no tiny model to check its errors on"]
    _, job = _job_for(adapter, tm.raw(fam))
    empty = Path(workdir) / "empty"
    empty.mkdir(parents=True, exist_ok=True)
    record = RunRecord(command=["contract"], returncode=0, wall_time=0.0, log_path=empty / "none.log")
    try:
        adapter.read_results(job, empty, record)
        out.append(f"{who}: read_results on an empty folder returned modes; it must raise ResultParseError")
    except BridgeError as exc:
        if exc.exit_code not in EXIT_CODES:
            out.append(f"{who}: read_results on an empty folder raised {type(exc).__name__} with exit code "
                       f"{exc.exit_code}, not in bridge.errors.EXIT_CODES")
    except Exception as exc:
        out.append(f"{who}: read_results on an empty folder raised {_short(exc)}; raise ResultParseError (exit 8)")
    return out


def _mac(a: np.ndarray, b: np.ndarray) -> float:
    # Allemang & Brown, 1st IMAC (1982), from memory: |aᵀb|² / ((aᵀa)(bᵀb))
    den = float(a @ a) * float(b @ b)
    return float((a @ b) ** 2 / den) if den > 0 else 0.0


def _sanity(label: str, tm: TinyModel, result, mesh, model) -> list[str]:
    from .fem import scalar_mass_matrix

    out = []
    f = np.asarray(result.frequencies)
    k = min(len(tm.frequencies), f.size)
    for i in range(k):
        dev = f[i] / tm.frequencies[i] - 1
        if abs(dev) > FREQUENCY_TOLERANCE:
            out.append(f"{label}: mode {i + 1} at {f[i]:.5g} Hz, {100 * dev:+.1f} % from the analytic "
                       f"{tm.frequencies[i]:.5g} Hz (allowed ±{100 * FREQUENCY_TOLERANCE:g} %; {tm.source})")
    if tm.shapes is not None:
        ref = tm.shapes(result.points)
        for i in range(k):
            mac = _mac(result.shapes[i, :, tm.component], ref[i])
            if mac < MIN_MAC:
                out.append(f"{label}: mode {i + 1} shape has MAC {mac:.3f} with the analytic shape "
                           f"(at least {MIN_MAC:g}); a wrong node order or a mode left out shows here")
    from .pipeline import cell_properties

    rho, thick = cell_properties(model, mesh)
    M = scalar_mass_matrix(mesh.points, mesh.cells, mesh.family, rho, thick)
    for i in range(min(1, f.size)):
        phi = result.shapes[i]
        mm = float(sum(phi[:, j] @ (M @ phi[:, j]) for j in range(3)))
        if abs(mm - 1) > MASS_TOLERANCE:
            out.append(f"{label}: mode {i + 1} has phi^T M phi = {mm:.4g} with modebridge's consistent mass "
                       f"(1 ± {MASS_TOLERANCE:g}); a wrong node order or mass matrix shows here")
    return out


def check_runs(adapter, workdir: str | Path) -> list[str]:
    """Tiny models with known answers on every declared family, support kind and option value."""
    from .pipeline import run_one

    who = f"plugin '{adapter.name}'"
    if adapter.locate() is None:
        return [f"{who}: the solver is not installed, so no tiny model could run"]
    cap = adapter.capabilities
    out: list[str] = []
    runs: list[tuple[str, TinyModel, str, dict]] = []
    for fam in sorted(cap.families):
        tm = _model_for(get_family(fam).section_kind, fam, cap.supports)
        if tm is not None:
            runs.append((f"family '{fam}' on {tm.name}", tm, fam, {}))
    done_kinds = {k for _, tm, _, _ in runs for k in tm.supports}
    for kind in sorted(set(cap.supports) - done_kinds):
        for tm in tiny_models():
            fams = [f for f in sorted(cap.families) if get_family(f).section_kind == tm.section]
            if kind in tm.supports and set(tm.supports) <= set(cap.supports) and fams:
                runs.append((f"support kind '{kind}' on {tm.name} ({fams[-1]})", tm, fams[-1], {}))
                break
    for o in cap.options:
        fams = [f for f in (o.applies_to or sorted(cap.families)) if f in cap.families]
        for fam in fams[:1]:
            tm = _model_for(get_family(fam).section_kind, fam, cap.supports)
            for v in _option_values(o) if tm else []:
                runs.append((f"option {o.name} = {v!r} on {tm.name} ({fam})", tm, fam, {o.name: v}))
    for n, (label, tm, fam, options) in enumerate(runs, start=1):
        label = f"{who}: {label}"
        try:
            prep, job = _job_for(adapter, tm.raw(fam), options)
            model = prep.model
            outcome = run_one(adapter, prep, job, Path(workdir) / f"run-{n:03d}")
        except BridgeError as exc:
            out.append(f"{label}: the core could not prepare the tiny model: {_short(exc)}")
            continue
        if not outcome.ok:
            out.append(f"{label}: the run failed: {_short(outcome.error)}")
            continue
        out.extend(_sanity(label, tm, outcome.result, prep.mesh, model))
    return out


def assert_contract(adapter, workdir: str | Path, run: bool = True) -> None:
    """Run every check; raise :class:`ContractError` listing each failure (one per line)."""
    workdir = Path(workdir)
    failures = check_declarations(adapter)
    if not failures:
        failures += check_node_orders(adapter)
        failures += check_decks(adapter, workdir / "decks")
        failures += check_errors(adapter, workdir / "errors")
        if run:
            failures += check_runs(adapter, workdir / "runs")
    if failures:
        raise ContractError(f"plugin '{getattr(adapter, 'name', '?')}' breaks the contract "
                            f"({len(failures)} failure(s)):\n" + "\n".join(f"- {f}" for f in failures))
