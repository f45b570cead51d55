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
    SolverOption("frd_format", str, "binary", "how ccx writes the mode shapes (.frd): 'binary' (*NODE OUTPUT: "
                 "float32 records, a third of the size, read faster) or 'ascii' (*NODE FILE: 6 significant digits, "
                 "readable in a text editor)", choices=("binary", "ascii")),
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
        springs=True, rotational_springs=True, couplings=frozenset({"rigid", "distributing"}),
        reference_points_alone=True, solid_connections=True,
        beams=True, beam_shapes=frozenset({"rectangle", "round", "tube", "i_section", "channel", "angle"}),
        beam_offsets=True,
        beam_shape_notes={"general": "CalculiX 2.20 expands its beams into bricks of a drawn shape; a section "
                                     "given only by its constants fits its user element U1 alone, which takes "
                                     "no offset and no product of inertia and is not verified here; use a "
                                     "shape, or another solver"},
    )

    def locate(self) -> str | None:
        return runner.find_ccx()

    def version(self) -> str | None:
        return runner.ccx_version()

    def write_deck(self, job: SolverJob, workdir: Path) -> Path:
        if job.family not in self.capabilities.families and job.cells.shape[0] > 0:
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
        node_ids, shapes = np.asarray(frd.node_ids), np.asarray(frd.displacements, float)
        if job.extra_node_ids:
            ids, extra = parser.read_node_print(dat_path, deck.EXTRA_SET)
            if extra.shape[0] != m:
                raise ResultParseError(f"{extra.shape[0]} printed displacement blocks for {m} modes", path=dat_path)
            keep = ~np.isin(node_ids, ids)
            node_ids = np.concatenate([node_ids[keep], ids])
            shapes = np.concatenate([shapes[:, keep], extra], axis=1)
        # the deck's own auxiliary nodes (beam mid-nodes, rigid bodies' rotation nodes, padding) are
        # numbered above the mesh's: they are not part of the results
        aux = node_ids > int(np.max(job.node_ids, initial=0))
        if aux.any():
            node_ids, shapes = node_ids[~aux], shapes[:, ~aux]
        warnings = (list(record.warnings) + shell_coupling_warnings(job) + stiffener_warnings(job)
                    + deep_beam_warnings(job))
        return RawModes(
            frequencies=np.asarray(dat.frequencies, float),
            eigenvalues=np.asarray(dat.eigenvalues, float),
            node_ids=node_ids, shapes=shapes,
            participation=dat.participation, effective_mass=dat.effective_mass,
            total_effective_mass=dat.total_effective_mass, reference_point=(0.0, 0.0, 0.0),
            normalisation="mass", solver_version=self.version() or "",
            element_type=deck.ELEMENT_TYPES.get(job.family, "B32R" if len(job.beams) else "no continuum"), warnings=warnings)


#: a stiffener section whose St Venant torsion constant is below this share of its polar moment
#: (J / (Iy + Iz)) warps enough for CalculiX's knots to stiffen it noticeably
WARPING_SHARE = 0.3


#: a member shorter than this many section depths is "deep": shear deformation matters, and B32R's
#: expansion into bricks departs from Timoshenko theory there
DEEP_BEAM_RATIO = 10.0


def deep_beam_warnings(job: SolverJob) -> list[str]:
    """CalculiX expands B32R into C3D20R bricks of the section, whose shear stiffness is its own:
    on a simply supported steel beam with L/h = 5 (40 elements) ccx 2.20 came out −0.3, −1.2,
    −2.8 % on bending modes 1–3 against Timoshenko theory, where OpenSees' and Kratos's beams were
    within 0.1 % (measured, tests/plugins/test_beams_physics.py). Said for every chain of beam
    elements (a member) shorter than :data:`DEEP_BEAM_RATIO` section depths."""
    if not len(job.beams):
        return []
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    beams = np.asarray(job.beams, np.int64)
    n = len(job.node_ids)
    graph = coo_matrix((np.ones(len(beams)), (beams[:, 0], beams[:, 1])), shape=(n, n))
    _, label = connected_components(graph, directed=False)
    length = np.linalg.norm(job.points[beams[:, 1]] - job.points[beams[:, 0]], axis=1)
    out = []
    for comp in np.unique(label[beams[:, 0]]):
        ks = np.flatnonzero(label[beams[:, 0]] == comp)
        sec = job.beam_sections[int(job.beam_section[ks[0]])]
        dims = dict(sec.dims)
        depth = max(dims.get("height", 0.0), dims.get("diameter", 0.0), dims.get("width", 0.0))
        span = float(length[ks].sum())
        if depth > 0 and span < DEEP_BEAM_RATIO * depth:
            out.append(f"beam of section '{sec.name}' is deep (length / depth = {span / depth:.3g} < "
                       f"{DEEP_BEAM_RATIO:g}): CalculiX's B32R, expanded into bricks, came out −0.3, −1.2, "
                       "−2.8 % on bending modes 1–3 of a beam with L/h = 5 against Timoshenko theory (measured); "
                       "check its higher modes against another solver's beams")
    return out


def stiffener_warnings(job: SolverJob) -> list[str]:
    """CalculiX joins a beam to a shell node through a knot that holds the beam's expanded section
    plane there, so a stiffener twists without warping, as if its J were its polar moment. Measured
    with ccx 2.20 on a free 120 × 80 × 2 mm steel plate with a 2 × 10 mm flat bar seated on it
    (J / Ip = 0.13): the twisting mode +13.5 % against a solid model (OpenSees −1.3 %); with a
    2 × 4 mm bar on an 80 × 80 mm plate (J / Ip = 0.55) within 1.1 % on the first four modes."""
    if not len(job.beams) or not len(job.beam_offset):
        return []
    extra = set(job.extra_node_ids)
    body = {int(n) for n in job.node_ids} - extra
    out = []
    for s in sorted({int(job.beam_section[k]) for k in range(len(job.beams))
                     if np.any(job.beam_offset[k]) and int(job.node_ids[job.beams[k, 0]]) in body}):
        sec = job.beam_sections[s]
        share = sec.j / (sec.iy + sec.iz)
        if share < WARPING_SHARE:
            out.append(f"stiffener section '{sec.name}' (J / (Iy + Iz) = {share:.2g}): CalculiX holds its section "
                       "plane at every shell node it shares, so its torsion is up to "
                       f"{1 / share:.2g} × too stiff; measured +13.5 % on the twisting mode of a plate with a "
                       "2 × 10 mm flat bar (J / (Iy + Iz) = 0.13) against a solid model; prefer a stockier "
                       "section here, or compare with another solver")
    return out


def shell_coupling_warnings(job: SolverJob) -> list[str]:
    """CalculiX 2.20's *RIGID BODY ties the translations of shell nodes, not their rotations, and
    *EQUATION terms on shell rotations are dropped without a message (both measured: a cantilever
    strip whose root edge is tied to a clamped reference point keeps a hinge mode at 0.013 Hz, with
    or without rotation equations). A footprint of several non-collinear nodes still fixes the body's
    rotation through their translations; the shell nodes then act as pins."""
    if not job.is_shell:
        return []
    extra = set(job.extra_node_ids)
    pos = {int(n): i for i, n in enumerate(job.node_ids)}
    out = []
    for c in job.couplings:
        shell = [n for n in c.nodes if n not in extra]
        if c.kind != "rigid" or not shell:
            continue
        x = job.points[[pos[n] for n in shell]]
        spread = np.linalg.svd(x - x.mean(axis=0), compute_uv=False) if len(shell) > 1 else np.zeros(3)
        line = len(shell) < 3 or spread[1] <= 1e-9 * max(spread[0], 1e-30)
        out.append(f"rigid coupling '{c.name}': CalculiX ties the translations of its {len(shell)} shell "
                   "node(s), not their rotations (they act as pins)"
                   + ("; they lie on one line, so the rotation about that line is NOT held (a hinge): "
                      "tie a footprint that spans an area" if line else ""))
    return out


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
