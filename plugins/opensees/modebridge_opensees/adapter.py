"""The OpenSees solver adapter: declarations plus three steps delegated to deck, runner, parser.

Shell formulation: the model's options ``[solver_options.opensees] quad_shell`` (ShellMITC4, the
default; ShellDKGQ; ASDShellQ4) and ``tri_shell`` (ASDShellT3, the default; ShellDKGT); the eigen
solver ``eigen_solver`` (genBandArpack, the default; fullGenLapack), the linear solver of its
shift-invert ``linear_solver`` (SuperLU, the default; ProfileSPD, UmfPack) and ``threads``. No
environment variable changes a result.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from bridge.errors import ResultParseError
from bridge.model import SUPPORT_KINDS
from bridge.solver import Capabilities, RawModes, RunRecord, SolverJob, SolverOption, Substitute

from . import deck, parser, runner

__all__ = ["OpenSeesAdapter", "SUBSTITUTES", "OPTIONS"]

#: families OpenSees has no element of -> what it runs instead (linear shells at half the size:
#: their error falls as h², measured on the cover panel within 1 % of CalculiX's S8R)
SUBSTITUTES = {
    "quad8": Substitute("quad4", 0.5, "OpenSees has no 8-node shell"),
    "tri6": Substitute("tri3", 0.5, "OpenSees has no 6-node shell"),
}

OPTIONS = (
    SolverOption("quad_shell", str, deck.ELEMENT_TYPES["quad4"],
                 "element of quad4 shells: ShellMITC4 (Dvorkin-Bathe, shear-deformable), ShellDKGQ "
                 "(Kirchhoff, thin) or ASDShellQ4", choices=deck.SHELL_ELEMENTS["quad4"], applies_to=("quad4",)),
    SolverOption("tri_shell", str, deck.ELEMENT_TYPES["tri3"],
                 "element of tri3 shells: ASDShellT3 (shear-deformable) or ShellDKGT (Kirchhoff, thin)",
                 choices=deck.SHELL_ELEMENTS["tri3"], applies_to=("tri3",)),
    SolverOption("eigen_solver", str, deck.EIGEN_SOLVERS[0],
                 "eigen solver of OpenSees' eigen command: genBandArpack (ARPACK, banded) or fullGenLapack "
                 f"(LAPACK, dense: every mode, slow; models up to {deck.FULL_EIGEN_MAX_DOF} free DOF); a frame of "
                 "beams alone of up to 3000 DOF always gets fullGenLapack (ARPACK fails on a free one)",
                 choices=deck.EIGEN_SOLVERS),
    SolverOption("linear_solver", str, deck.LINEAR_SOLVERS[0],
                 "linear solver (OpenSees' system) that factorises K for genBandArpack's shift-invert: SuperLU "
                 "(sparse, the fastest exact one measured), ProfileSPD (skyline, OpenSees' own default) "
                 "or UmfPack; the same frequencies to 1e-12 (measured)", choices=deck.LINEAR_SOLVERS),
    SolverOption("threads", int, 0, "threads of this solver's BLAS/OpenMP (0: the run's, [run] threads or "
                 "the study's --threads); does not change the result", minimum=0, maximum=256, affects_result=False),
)


class OpenSeesAdapter:
    name = "opensees"
    label = "OpenSees (openseespy)"
    executable = "python"
    install_hint = runner.INSTALL_HINT
    capabilities = Capabilities(
        families=frozenset(deck.ELEMENT_TYPES),
        supports=frozenset(SUPPORT_KINDS),
        # rotary inertia: `mass` could put Ixx Iyy Izz on a shell node's rotations, but Izz would
        # then sit on the shell elements' artificial drilling stiffness, and modebridge's own mass
        # bookkeeping is translational; not offered until it is done properly
        point_mass=True, rotary_inertia=False, distributed_mass=True,
        reports_effective_mass=False,
        substitutes=SUBSTITUTES, options=OPTIONS,
        springs=True, rotational_springs=True, couplings=frozenset({"rigid"}), reference_points_alone=True,
        beams=True, beam_offsets=True,
    )

    def locate(self) -> str | None:
        return runner.find_python()

    def version(self) -> str | None:
        return runner.opensees_version()

    def element_for(self, job: SolverJob) -> str:
        """The OpenSees element for the job's family, honouring the options quad_shell / tri_shell; on
        warped quads the default ShellMITC4 gives way to ASDShellQ4 (see deck.WARPED_QUAD_ELEMENT)."""
        setting = {"quad4": job.options.get("quad_shell"), "tri3": job.options.get("tri_shell")}.get(job.family)
        element = deck.choose_element(job.family, setting)
        if element == deck.ELEMENT_TYPES["quad4"] and job.family == "quad4" and deck.quad_warp(job) > deck.WARP_LIMIT:
            return deck.WARPED_QUAD_ELEMENT
        return element

    def _warp_note(self, job: SolverJob, element: str) -> list[str]:
        warp = deck.quad_warp(job)
        if warp <= deck.WARP_LIMIT:
            return []
        if element == deck.WARPED_QUAD_ELEMENT:
            return [f"warped quads (warp {warp:.3g} of the element size): OpenSees' ShellMITC4 is too stiff on "
                    f"them (+22 % measured on a bent bracket), so {element} is used"]
        return [f"warped quads (warp {warp:.3g} of the element size) with {element}: ShellMITC4 and ShellDKGQ "
                "were 21-22 % too stiff on such a mesh (measured); ASDShellQ4 is not"]

    def write_deck(self, job: SolverJob, workdir: Path) -> Path:
        workdir = Path(workdir)
        for name in (deck.RESULTS_NAME, deck.RESULTS_NAME + ".part", runner.LOG_NAME):
            (workdir / name).unlink(missing_ok=True)  # never read an earlier run's output
        return deck.write_deck(job, workdir, self.element_for(job))

    def run(self, job: SolverJob, workdir: Path) -> RunRecord:
        return runner.run_script(Path(workdir), threads=job.options.get("threads") or job.threads,
                                 timeout=job.timeout)

    def read_results(self, job: SolverJob, workdir: Path, record: RunRecord) -> RawModes:
        workdir = Path(workdir)
        path = workdir / deck.RESULTS_NAME
        if not path.is_file() or path.stat().st_size == 0:
            raise ResultParseError("the OpenSees script exited 0 but wrote no results", path=path)
        res = parser.read_results(workdir)
        # the mode count, the band and the nodes are the core's post-conditions (bridge/postconditions.py)
        keep = np.ones(res.frequencies.shape, bool)
        warnings = list(record.warnings) + self._warp_note(job, str(res.element))
        if abs(res.element_factor - 1.0) > 1e-6:
            warnings.append(
                f"{res.element} (OpenSees {res.opensees_version}) integrates stiffness and mass over "
                f"{res.element_factor:.6g} times each element's volume; the script divided E and the "
                "density by that factor, so stiffness, mass and added masses keep their proportions")
        if not res.mass_verified:
            warnings.append(
                f"{res.element}: OpenSees' inertia forces do not reproduce the mass matrix (total "
                f"{res.total_mass.max():.6g} against the model's {res.model_mass:.6g}, M-orthogonality "
                f"{res.orthogonality:.2g}); the modes are kept as ARPACK returns them, M-orthonormal "
                "for the mass matrix the eigen solver assembled, and are checked by modebridge's "
                "mass_normalisation check only")
        return RawModes(
            frequencies=res.frequencies[keep], eigenvalues=res.eigenvalues[keep],
            node_ids=res.node_ids, shapes=np.array(res.translations[keep]),
            rotations=None if res.rotations is None else np.array(res.rotations[keep]),
            normalisation="mass", solver_version=self.version() or res.opensees_version,
            element_type=("ElasticTimoshenkoBeam" if len(job.beams) else "no continuum")
            if res.element == deck.NO_CONTINUUM else res.element, warnings=warnings)

