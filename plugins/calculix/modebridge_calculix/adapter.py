"""The CalculiX solver adapter: declarations plus three steps delegated to deck, runner, parser."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from bridge.errors import DeckWriteError, ResultParseError
from bridge.model import SUPPORT_KINDS
from bridge.solver import Capabilities, RawModes, RunRecord, SolverJob, SolverOption, Substitute

from . import deck, parser, runner

__all__ = ["CalculixAdapter", "SUBSTITUTES", "OPTIONS"]

#: families served by another element: S3 (tri3) is far too stiff in bending (clamped steel plate
#: 100 x 100 x 2 mm at 4 mm: +25 %; the contract kit's simply supported plate at 9 mm: +100 %),
#: so tri3 models run with S6 (tri6) at the same element size
SUBSTITUTES = {"tri3": Substitute("tri6", 1.0, "CalculiX's S3 is far too stiff in bending (+25 % on a "
                                               "clamped plate at 4 mm)")}

#: CalculiX's eigen solver here is ARPACK on SPOOLES (ccx 2.20 of Debian links only those: no PARDISO, PaStiX),
#: so there is no eigen-solver choice to offer; only its thread count
OPTIONS = (
    SolverOption("threads", int, 0, "threads of ccx (OMP_NUM_THREADS, CCX_NPROC_EQUATION_SOLVER; 0: the run's, "
                 "[run] threads or the study's --threads); does not change the result", minimum=0, maximum=256,
                 affects_result=False),
)


class CalculixAdapter:
    name = "calculix"
    label = "CalculiX CrunchiX"
    executable = "ccx"
    install_hint = runner.INSTALL_HINT
    capabilities = Capabilities(
        families=frozenset(deck.ELEMENT_TYPES) - frozenset(SUBSTITUTES),
        supports=frozenset(SUPPORT_KINDS),
        point_mass=True, rotary_inertia=False, distributed_mass=True,
        reports_effective_mass=True, substitutes=SUBSTITUTES, equations=True, options=OPTIONS,
    )

    def locate(self) -> str | None:
        return runner.find_ccx()

    def version(self) -> str | None:
        return runner.ccx_version()

    def write_deck(self, job: SolverJob, workdir: Path) -> Path:
        if job.family not in self.capabilities.families:
            raise DeckWriteError(f"the CalculiX plugin does not offer family '{job.family}'"
                                 + (f"; {SUBSTITUTES[job.family].reason}" if job.family in SUBSTITUTES else ""))
        for suffix in (".dat", ".frd", ".sta", ".cvg", ".log"):  # never read an earlier run's output
            (Path(workdir) / f"{job.jobname}{suffix}").unlink(missing_ok=True)
        return deck.write_deck(job, workdir)

    def run(self, job: SolverJob, workdir: Path) -> RunRecord:
        return runner.run_ccx(Path(workdir), job.jobname, threads=job.options.get("threads") or job.threads,
                              timeout=job.timeout)

    def read_results(self, job: SolverJob, workdir: Path, record: RunRecord) -> RawModes:
        workdir = Path(workdir)
        dat_path = workdir / f"{job.jobname}.dat"
        frd_path = workdir / f"{job.jobname}.frd"
        for p in (dat_path, frd_path):
            if not p.is_file() or p.stat().st_size == 0:
                raise ResultParseError("CalculiX exited 0 but wrote no results (is *END STEP missing?)", path=p)
        _written_by_this_run(frd_path, record)
        dat = parser.read_dat_file(dat_path)
        frd = parser.read_frd(frd_path)
        m = dat.frequencies.size  # the count and the band are the core's post-conditions (bridge/postconditions.py)
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


#: seconds of slack between the run's start and the .frd's stamp (it holds whole seconds)
_STAMP_SLACK = 2.0


def _written_by_this_run(frd_path: Path, record: RunRecord) -> None:
    """Refuse a .frd that CalculiX stamped (1UDATE, 1UTIME: local time) before this run began:
    another run's file put in this folder (the .dat is cross-checked against it after)."""
    import datetime as dt
    import time

    date = clock = None
    with open(frd_path, "rb") as fh:
        for _ in range(20):
            line = fh.readline().decode("ascii", "replace")
            if line.startswith("    1UDATE"):
                date = line[10:].strip()
            elif line.startswith("    1UTIME"):
                clock = line[10:].strip()
    if not date or not clock:
        return  # an older CalculiX without the stamp: nothing to compare
    try:
        stamp = dt.datetime.strptime(f"{date} {clock}", "%d.%B.%Y %H:%M:%S").timestamp()
    except ValueError:
        return
    started = time.time() - record.wall_time - _STAMP_SLACK
    if stamp < started:
        raise ResultParseError(f"written at {date} {clock}, before this run started: the results belong to "
                               "another run (refused)", path=frd_path)
