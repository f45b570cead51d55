"""What a report holds, gathered before any HTML is written."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from ..results import ModalResult

__all__ = ["Finding", "ResultEntry", "ComparisonEntry", "ConvergenceEntry", "VariantEntry", "Report"]


@dataclass
class Finding:
    level: str  #: "fail", "warn" or "note"
    where: str  #: what it concerns (a result's label, "comparison", "study", …)
    text: str


@dataclass
class ResultEntry:
    label: str  #: how the report names this result (a solver, a path, a level)
    result: ModalResult
    path: Path | None = None  #: the result file, when read from one
    sha256: str = ""  #: of the result file
    pictures: dict[int, bytes] = field(default_factory=dict)  #: 1-based mode → PNG
    animations: dict[int, bytes] = field(default_factory=dict)  #: 1-based mode → GIF
    pictured_modes: int = 0  #: how many modes were to be drawn
    anchor: str = ""  #: HTML id of its section
    model_picture: bytes | None = None  #: PNG of the mesh with supports and masses marked
    left_out_animations: list[int] = field(default_factory=list)  #: modes whose animation the size cap left out
    left_out_pictures: list[int] = field(default_factory=list)  #: modes whose picture the size cap left out


@dataclass
class ComparisonEntry:
    comparison: object  #: bridge.compare.results.ResultComparison
    freqs_a: list[float]
    freqs_b: list[float]
    heatmap: bytes | None = None  #: PNG


@dataclass
class ConvergenceEntry:
    study: dict  #: one element of convergence.json (ConvergenceStudy.as_dict + "plots")
    plots: list[tuple[str, bytes]] = field(default_factory=list)  #: (caption, PNG)


@dataclass
class VariantEntry:
    data: dict  #: one variant of variants.json (VariantResult.as_dict)
    heatmap: bytes | None = None
    comparison: object | None = None  #: recomputed ResultComparison, when both results were found
    freqs_a: list[float] = field(default_factory=list)  #: baseline, Hz
    freqs_b: list[float] = field(default_factory=list)  #: variant, Hz


@dataclass
class Report:
    kind: str  #: "run", "result", "comparison", "convergence", "variants" or "verification"
    title: str
    sources: list[str]
    results: list[ResultEntry] = field(default_factory=list)
    comparisons: list[ComparisonEntry] = field(default_factory=list)
    convergence: list[ConvergenceEntry] = field(default_factory=list)
    baseline: dict | None = None  #: variants.json "baseline"
    variants: list[VariantEntry] = field(default_factory=list)
    failed_runs: list[tuple[str, str]] = field(default_factory=list)  #: (label, error text)
    verification: list | None = None  #: [VerifyCase] when a verify.json was read
    verification_file: str = ""
    findings: list[Finding] = field(default_factory=list)
    created: str = ""
    modebridge_version: str = ""
    size_cap: int = 0  #: bytes the page was held to (0: no cap)
    cache_dir: Path | None = None  #: where charts drawn for this report are kept for the next one

    def add(self, level: str, where: str, text: str) -> None:
        self.findings.append(Finding(level, where, text))
