"""The Kratos Multiphysics solver adapter: declarations plus three steps delegated to deck, runner, parser.

Element choice (see :data:`modebridge_kratos.deck.ELEMENT_TYPES`):

* quad4 shells: Kratos's Reissner–Mindlin MITC4 quad (``shell_theory = "auto"``, the default), with
  its drilling penalty raised to γ = G (deck.MITC4_DRILLING_FACTOR: Kratos's own 0.1 makes bent
  parts up to 1.6 % soft); tri3 shells: the thin (Kirchhoff–Love) triangle, as Kratos's thick one is
  soft (−4.7 % on a bent bracket's twisting modes). ``shell_theory = "thin"`` or ``"thick"`` forces
  one theory on both. A thin element on a section that is not thin (t/b of its narrowest extent
  such that a strip of it twists ≥ 1 % stiffer in Kirchhoff theory) is warned of with the figure.
* tet4, tet10, hex20: the small-displacement solids with their default (full) integration.
* no element of its own (the core meshes the substitute the plugin declares, see ``SUBSTITUTES``):
  quad8 and tri6 (Kratos has no such shell: quad4 / tri3 at half the element size); hex8,
  because Kratos's 8-node bricks lock in bending (hex20 at the same size instead).
* beams: CrLinearBeamElement3D2N (shear deformation, consistent mass with rotary inertia); springs:
  SpringDamperElement3D from an auxiliary node carrying the mount's relative motion in its own axes;
  couplings and support equations: master-slave rows (modebridge_kratos.connections). A case with
  any of those, or without continuum, is solved by run_case.py on Kratos's element matrices with the
  constraints applied as u = T u_red (Kratos 10.4.4's eigen strategy failed with such constraints).
* the thin quad's membrane is soft on coarse meshes: in-plane modes come out low (a 60 × 2
  strip's in-plane bending mode −10 %), bending modes are fine: one more reason the default quad is
  the thick one. The thick (MITC4) quad does not show this (tests/plugins/kratos/test_kratos_physics.py::test_in_plane_bending_of_the_strip).

Mode shapes come back mass-normalised with Kratos's own element mass matrices; run_case.py also
checks each eigenpair's Rayleigh quotient from the element stiffness matrices against its
eigenvalue, which proves the map from Kratos's DOF numbering back to the nodes and catches pairs
the eigensolver returned unconverged (then it solves again with a better shift).

``min_frequency`` / ``max_frequency``: Kratos computes the lowest ``modes`` modes; the core drops
the ones outside the band (bridge/postconditions.py).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from bridge.errors import ResultCheckError, ResultParseError
from bridge.model import SUPPORT_KINDS
from bridge.solver import Capabilities, RawModes, RunRecord, SolverJob, SolverOption, Substitute

from . import deck, parser, runner

__all__ = ["KratosAdapter"]

#: Kratos's own φᵀMφ further than this from 1 is reported (we renormalise either way)
_NORMALISATION_NOTE = 0.01

#: families Kratos has no (good) element of -> what it runs instead. Half the size for the linear
#: shells: their error falls as h², so halving h brings a quad4 mesh near the quadratic one's
#: accuracy on the low modes (measured on the cover panel: within 1 % of CalculiX's S8R).
SUBSTITUTES = {
    "quad8": Substitute("quad4", 0.5, "Kratos has no 8-node shell"),
    "tri6": Substitute("tri3", 0.5, "Kratos has no 6-node shell"),
    "hex8": Substitute("hex20", 1.0, "Kratos's 8-node bricks lock in bending (+14 to +22 % on a plate)"),
}

OPTIONS = (
    SolverOption("shell_theory", str, "auto", "shell formulation: auto (Reissner-Mindlin MITC4 quads, thin "
                 "triangles: Kratos's thick triangle is soft), thin (Kirchhoff-Love corotational shells: twist "
                 "too stiff where the section is not thin, warned with the figure) or thick (Reissner-Mindlin: "
                 "MITC4 quads, thick triangles)", choices=deck.SHELL_THEORIES, applies_to=("quad4", "tri3")),
    SolverOption("eigen_solver", str, deck.EIGEN_SOLVERS[0],
                 "eigen solver: spectra_sym_g_eigs_shift (shift-invert, any model) or eigen_eigensystem "
                 "(subspace iteration without a shift: supported models only)", choices=deck.EIGEN_SOLVERS),
    SolverOption("threads", int, 0, "OpenMP threads of this solver (0: the run's, [run] threads or the study's "
                 "--threads); does not change the result", minimum=0, maximum=256, affects_result=False),
)


class KratosAdapter:
    name = "kratos"
    label = "Kratos Multiphysics (StructuralMechanicsApplication)"
    executable = "python (with KratosMultiphysics)"
    install_hint = runner.INSTALL_HINT
    capabilities = Capabilities(
        families=frozenset(deck.ELEMENT_TYPES),
        supports=frozenset(SUPPORT_KINDS),
        point_mass=True, rotary_inertia=False, distributed_mass=True,
        reports_effective_mass=False,
        substitutes=SUBSTITUTES, options=OPTIONS,
        # couplings, springs in their mount's axes and support equations are master-slave rows
        # (modebridge_kratos.connections) that run_case.py applies exactly; beams CrLinearBeamElement3D2N
        equations=True, springs=True, rotational_springs=True, couplings=frozenset({"rigid", "distributing"}),
        reference_points_alone=True, beams=True, solid_connections=True,
        # a beam off its nodes: on auxiliary nodes at its centroid, tied to its nodes (connections.py)
        beam_offsets=True,
    )

    def locate(self) -> str | None:
        return runner.find_python()

    def version(self) -> str | None:
        return runner.kratos_version()

    def write_deck(self, job: SolverJob, workdir: Path) -> Path:
        workdir = Path(workdir)
        for name in (deck.RESULTS, runner.LOG):  # never read an earlier run's output
            (workdir / name).unlink(missing_ok=True)
        return deck.write_deck(job, workdir)

    def run(self, job: SolverJob, workdir: Path) -> RunRecord:
        return runner.run_case(Path(workdir), deck.MAIN, threads=job.options.get("threads") or job.threads,
                               timeout=job.timeout)

    def read_results(self, job: SolverJob, workdir: Path, record: RunRecord) -> RawModes:
        path = Path(workdir) / deck.RESULTS
        res = parser.read_results(path)
        lam = res.eigenvalues
        scale = max(float(np.abs(lam).max()), 1.0)
        bad = np.flatnonzero(np.abs(res.rayleigh_quotient - lam) > deck.RAYLEIGH_TOLERANCE * scale)
        if bad.size:
            i = int(bad[0])
            raise ResultCheckError(f"{path}: mode {i + 1}: Rayleigh quotient {res.rayleigh_quotient[i]:.6g} from "
                                   f"Kratos's element matrices differs from its eigenvalue {lam[i]:.6g}")
        if res.node_ids.size != job.node_ids.size:
            raise ResultParseError(f"{res.node_ids.size} nodes in the results for {job.node_ids.size} in the job",
                                   path=path)
        # the requested band and the mode count are the core's post-conditions (bridge/postconditions.py)
        idx = np.arange(lam.size)
        warnings = list(record.warnings)
        if res.note:
            warnings.append(res.note)
        off = np.abs(res.kratos_modal_mass - 1.0)
        if np.any(off > _NORMALISATION_NOTE):
            warnings.append(f"Kratos's eigenvectors had phi^T M phi between {res.kratos_modal_mass.min():.4g} and "
                            f"{res.kratos_modal_mass.max():.4g}; renormalised with its element mass matrices")
        if job.is_shell and deck.shell_theory(job) == "thin":
            mm = 1e3 / job.units.length  # system length -> mm
            warnings += [f"section '{name}': thin (Kirchhoff) shell {deck.element_type(job)} on a {t * mm:.4g} mm "
                         f"section whose narrowest extent is {b * mm:.4g} mm (t/b = {t / b:.3f}): a free strip of it twists "
                         f"about {100 * x:.1f} % higher in frequency than in 3-D (torsion constant b t³/3 against "
                         f"b t³/3 (1 − 0.630 t/b)); measured on a bent 20 × 2 mm bracket: +3.1 to +3.7 % on its "
                         f"twisting modes against a tet10 solid, where the Reissner–Mindlin quad (quad4 with "
                         f"[solver_options.kratos] shell_theory = \"auto\", the default, or \"thick\") is within 0.6 %"
                         for name, t, b, x in deck.kirchhoff_stiffening(job)]
        return RawModes(
            frequencies=np.asarray(res.frequencies[idx], float),
            eigenvalues=np.asarray(lam[idx], float),
            node_ids=np.asarray(res.node_ids), shapes=np.asarray(res.translations[idx], float),
            rotations=None if res.rotations is None else np.asarray(res.rotations[idx], float),
            normalisation="mass", solver_version=self.version() or res.kratos_version,
            element_type=res.element_type or deck.element_type(job), warnings=warnings)
