"""What each solver gets for a model: its element family (and mesh size), and its options.

* :func:`choose_element` — the family a solver runs the model with, and why: the model's own
  family (``mesh.family``, the preferred one) when the solver has it; else the family the
  plugin declares as its substitute (``Capabilities.substitutes``: e.g. quad8 → quad4 at half
  the element size); a family the model pins for that solver (``mesh.solver_family``) wins.
* :func:`model_for` — the model re-meshed for that choice (family, divisions or size).
* :func:`solver_options` — the model's ``[solver_options.<solver>]`` validated against the
  options the plugin declares, every option with its value (defaults filled in); a bad one is
  a :class:`ModelError` naming the file and ``solver_options.<solver>.<option>``.
* :func:`options_key` — the options that decide a result (for a study task's cache key).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

from .elements import get_family
from .errors import CapabilityError, ModelError
from .model import Model
from .solver import SolverAdapter

__all__ = ["ElementChoice", "choose_element", "model_for", "solver_options", "options_key"]


@dataclass(frozen=True)
class ElementChoice:
    solver: str
    requested: str  #: the model's family (mesh.family)
    family: str  #: the family this solver runs with
    size_factor: float  #: element size relative to the model's
    how: str  #: "model" (its own family), "substitute" (the plugin's) or "pinned" (mesh.solver_family)
    reason: str  #: one line for the summary

    @property
    def changed(self) -> bool:
        return self.family != self.requested or self.size_factor != 1.0

    def as_dict(self) -> dict:
        return asdict(self)


def choose_element(model: Model, adapter: SolverAdapter) -> ElementChoice:
    cap = adapter.capabilities
    name = adapter.name
    want = model.mesh.family
    pinned = model.mesh.solver_family.get(name)
    if pinned is not None:
        if pinned not in cap.families:
            raise CapabilityError(f"mesh.solver_family.{name}: solver '{name}' has no '{pinned}' element; "
                                  f"it offers {', '.join(sorted(cap.families))}")
        _same_shape_ok(model, pinned, f"mesh.solver_family.{name}")
        return ElementChoice(name, want, pinned, 1.0, "pinned",
                             f"{pinned} pinned by the model (mesh.solver_family.{name})")
    if want in cap.families:
        return ElementChoice(name, want, want, 1.0, "model", f"{want}, the model's family")
    sub = cap.substitutes.get(want)
    if sub is None or sub.family not in cap.families:
        offers = ", ".join(sorted(cap.families))
        raise CapabilityError(f"mesh.family: solver '{name}' has no '{want}' element; it offers {offers}, and "
                              f"no substitute for '{want}' (pin one: mesh.solver_family.{name} = \"...\")")
    if get_family(sub.family).section_kind != get_family(want).section_kind:
        raise CapabilityError(f"solver '{name}': its substitute for '{want}' is '{sub.family}', a "
                              f"{get_family(sub.family).section_kind} family; the plugin is broken")
    _same_shape_ok(model, sub.family, "mesh.family")
    size = "the same element size" if sub.size_factor == 1.0 else (
        "half the element size" if sub.size_factor == 0.5 else f"{sub.size_factor:g} × the element size")
    return ElementChoice(name, want, sub.family, float(sub.size_factor), "substitute",
                         f"{sub.family} at {size} instead of {want}: {sub.reason}")


def _same_shape_ok(model: Model, family: str, field: str) -> None:
    if model.geometry.kind == "polygon" and get_family(family).shape == "quad" and len(model.geometry.vertices) != 4:
        raise CapabilityError(f"{field}: '{family}' quads on a polygon need exactly four vertices")


def model_for(model: Model, choice: ElementChoice) -> Model:
    """The model with the chosen family and, for a size factor, finer (or coarser) divisions or size."""
    if not choice.changed:
        return model
    spec = model.mesh
    update: dict[str, Any] = {"family": choice.family}
    f = choice.size_factor
    if f != 1.0:
        if spec.divisions is not None:
            update["divisions"] = [max(1, int(math.ceil(n / f - 1e-9))) for n in spec.divisions]
        else:
            update["size"] = spec.size * f
    return model.model_copy(update={"mesh": spec.model_copy(update=update)})


def solver_options(model: Model, adapter: SolverAdapter, source: str | Path | None = None) -> dict[str, Any]:
    """The solver's options for this model: every declared one, the model's value or the default."""
    declared = {o.name: o for o in adapter.capabilities.options}
    given = model.solver_options.get(adapter.name, {})
    where = f"solver_options.{adapter.name}"
    out = {name: o.default for name, o in declared.items()}
    for key, value in given.items():
        opt = declared.get(key)
        if opt is None:
            accepted = ", ".join(declared) if declared else "none (it declares no options)"
            raise ModelError(f"solver '{adapter.name}' has no option '{key}'; accepted: {accepted}",
                             source=source, field=f"{where}.{key}")
        out[key] = _coerce(opt, value, source, f"{where}.{key}")
    return out


def _coerce(opt, value, source, field) -> Any:
    t = opt.type
    ok = (isinstance(value, bool) if t is bool else
          isinstance(value, int) and not isinstance(value, bool) if t is int else
          isinstance(value, (int, float)) and not isinstance(value, bool) if t is float else
          isinstance(value, str))
    if not ok:
        raise ModelError(f"must be a {t.__name__}, got {value!r}" + _accepted(opt), source=source, field=field)
    if t is float:
        value = float(value)
    if opt.choices is not None and value not in opt.choices:
        raise ModelError(f"{value!r} is not accepted" + _accepted(opt), source=source, field=field)
    if opt.minimum is not None and value < opt.minimum:
        raise ModelError(f"must be at least {opt.minimum:g}, got {value!r}", source=source, field=field)
    if opt.maximum is not None and value > opt.maximum:
        raise ModelError(f"must be at most {opt.maximum:g}, got {value!r}", source=source, field=field)
    return value


def _accepted(opt) -> str:
    if opt.choices is not None:
        return "; accepted: " + ", ".join(str(c) for c in opt.choices)
    return ""


def options_key(adapter: SolverAdapter, options: dict[str, Any]) -> dict[str, Any]:
    """The options that decide the result (all but those declared ``affects_result=False``)."""
    keep = {o.name for o in adapter.capabilities.options if o.affects_result}
    return {k: v for k, v in sorted(options.items()) if k in keep}
