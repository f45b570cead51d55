"""The mesh quality gate, run on every mesh before any solver sees it.

Figure: gmsh's minSICN per element (the minimum signed inverse condition number of the
element's Jacobian over the element, high-order geometry included: 1 for an ideal element,
≤ 0 for an inverted or degenerate one). Thresholds:

* ``minSICN ≤ 0`` (:data:`INVERTED`): an inverted or degenerate element. No solver gives a
  meaningful answer on it (a solver stops on a non-positive Jacobian, or, worse, returns
  frequencies): an error naming the element's location and the named regions it touches.
* ``minSICN < 0.1`` (:data:`POOR_QUALITY`): a poorly shaped element; the run goes on and its
  checks carry a warning with the figure. 0.1 is common practice for the SICN measure, no source.

A zero or negative element measure (length, area or volume from the corner nodes) is an
error as well, whatever the quality figure says.
"""

from __future__ import annotations

import numpy as np

from ..errors import MeshingError
from ..mesh import Mesh

__all__ = ["INVERTED", "POOR_QUALITY", "quality_gate", "MeshQualityError"]

INVERTED = 0.0  #: minSICN at or below this: inverted or degenerate element (an error)
POOR_QUALITY = 0.1  #: minSICN below this: poorly shaped element (a warning)


class MeshQualityError(MeshingError):
    """The mesh holds inverted or degenerate elements."""


def _touching_regions(mesh: Mesh, cell: np.ndarray) -> list[str]:
    nodes = set(int(n) for n in cell)
    return [name for name in mesh.regions if nodes & set(int(n) for n in mesh.region_nodes(name))]


def quality_gate(mesh: Mesh, source: str = "") -> dict:
    """Refuse a mesh with inverted or degenerate elements; return figures for the run's checks:
    ``quality_min``, ``quality_poor`` (count below :data:`POOR_QUALITY`), thresholds.

    Raises :class:`MeshQualityError` naming the worst element's centre (mm), the regions it
    touches and how many elements are bad.
    """
    from .gmsh import _cell_measure

    q = mesh.quality
    meas = _cell_measure(mesh.points, mesh.cells, mesh.family)
    ref = float(np.abs(meas).max()) if meas.size else 0.0
    degenerate = np.abs(meas) <= 1e-12 * ref if ref > 0 else np.ones(meas.shape, bool)
    bad = degenerate.copy()
    if q is not None and q.size == mesh.n_elements:
        bad |= q <= INVERTED
    if bad.any():
        idx = np.flatnonzero(bad)
        worst = int(idx[np.argmin(q[idx])]) if q is not None and q.size == mesh.n_elements else int(idx[0])
        centre = mesh.points[mesh.cells[worst]].mean(axis=0) * 1e3
        touch = _touching_regions(mesh, mesh.cells[worst])
        where = (f"touching region(s) {', '.join(repr(t) for t in touch)}" if touch
                 else "in the body, away from every named region")
        fig = f"minSICN {q[worst]:.3f}" if q is not None and q.size == mesh.n_elements else "zero measure"
        prefix = f"{source}: " if source else ""
        raise MeshQualityError(
            f"{prefix}mesh: {idx.size} inverted or degenerate {mesh.family} element(s) ({fig}, threshold "
            f"≤ {INVERTED:g}); the worst is centred at ({centre[0]:.3g}, {centre[1]:.3g}, {centre[2]:.3g}) mm, "
            f"{where}; no solver runs on it: use a finer mesh.size there (or a first-order family)")
    out = {"quality_poor_below": POOR_QUALITY, "quality_inverted_at_or_below": INVERTED}
    if q is not None and q.size:
        out["quality_min"] = float(q.min())
        out["quality_poor"] = int((q < POOR_QUALITY).sum())
    return out
