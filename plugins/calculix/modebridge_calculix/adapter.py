"""The CalculiX solver adapter: declarations plus three steps delegated to deck, runner, parser."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from bridge.errors import ResultParseError
from bridge.model import SUPPORT_KINDS
from bridge.solver import Capabilities, RawModes, RunRecord, SolverJob

from . import deck, parser, runner

__all__ = ["CalculixAdapter"]


class CalculixAdapter:
    name = "calculix"
    label = "CalculiX CrunchiX"
    executable = "ccx"
    install_hint = runner.INSTALL_HINT
    capabilities = Capabilities(
        families=frozenset(deck.ELEMENT_TYPES),
        supports=frozenset(SUPPORT_KINDS),
        point_mass=True, rotary_inertia=False, distributed_mass=True,
        reports_effective_mass=True,
    )

    #: elements of CalculiX known to misbehave, with the figure ``modebridge verify --matrix``
    #: measured (CalculiX 2.20): warned at ``check`` and in every run that uses them
    element_notes = {
        "tri3": ("S3 (3-node shell, expanded to wedges) is far too stiff in bending: +26 % on a clamped "
                 "and +40 % on a free square plate at 4 mm (verify --matrix; Kratos and OpenSees within 1 %); "
                 "use tri6 (S6), quad8 or quad4 with CalculiX"),
    }

    def locate(self) -> str | None:
        return runner.find_ccx()

    def version(self) -> str | None:
        return runner.ccx_version()

    def write_deck(self, job: SolverJob, workdir: Path) -> Path:
        for suffix in (".dat", ".frd", ".sta", ".cvg", ".log"):  # never read an earlier run's output
            (Path(workdir) / f"{job.jobname}{suffix}").unlink(missing_ok=True)
        return deck.write_deck(job, workdir)

    def run(self, job: SolverJob, workdir: Path) -> RunRecord:
        return runner.run_ccx(Path(workdir), job.jobname, threads=job.threads, timeout=job.timeout)

    def read_results(self, job: SolverJob, workdir: Path, record: RunRecord) -> RawModes:
        workdir = Path(workdir)
        dat_path = workdir / f"{job.jobname}.dat"
        frd_path = workdir / f"{job.jobname}.frd"
        for p in (dat_path, frd_path):
            if not p.is_file() or p.stat().st_size == 0:
                raise ResultParseError("CalculiX exited 0 but wrote no results (is *END STEP missing?)", path=p)
        dat = parser.read_dat_file(dat_path)
        frd = parser.read_frd(frd_path)
        m = dat.frequencies.size
        if m == 0:
            raise ResultParseError("no eigenvalue in the requested range", path=dat_path)
        if job.max_frequency is None and m < job.modes:
            raise ResultParseError(f"CalculiX returned {m} of the {job.modes} modes asked for", path=dat_path)
        if frd.displacements.shape[0] != m:
            raise ResultParseError(f"{frd.displacements.shape[0]} mode shapes for {m} eigenvalues", path=frd_path)
        if not np.allclose(frd.frequencies, dat.frequencies, rtol=1e-4, atol=1e-3):
            raise ResultParseError("mode frequencies in .frd and .dat disagree", path=frd_path)
        return RawModes(
            frequencies=np.asarray(dat.frequencies, float),
            eigenvalues=np.asarray(dat.eigenvalues, float),
            node_ids=np.asarray(frd.node_ids), shapes=np.asarray(frd.displacements, float),
            participation=dat.participation, effective_mass=dat.effective_mass,
            total_effective_mass=dat.total_effective_mass, reference_point=(0.0, 0.0, 0.0),
            normalisation="mass", solver_version=self.version() or "",
            element_type=deck.ELEMENT_TYPES[job.family], warnings=list(record.warnings))
