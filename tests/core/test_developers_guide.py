"""The contributor guide names files that exist (its "where things go" must match the tree)."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _paths(text: str) -> set[str]:
    out = set()
    for m in re.finditer(r"(?:bridge|tests|plugins|fixtures|benchmarks|scripts)/[A-Za-z0-9_/{},.<>*-]+", text):
        p = m.group(0).rstrip(".,)")
        if "<" in p or "*" in p:
            continue  # a pattern (plugins/<solver>/…), not a file
        brace = re.search(r"\{([^}]*)\}", p)
        if brace:
            for part in brace.group(1).split(","):
                out.add(p[:brace.start()] + part + p[brace.end():])
        else:
            out.add(p)
    return out


def test_every_path_in_the_guide_exists():
    text = (ROOT / "DEVELOPERS.md").read_text()
    missing = sorted(p for p in _paths(text) if not (ROOT / p).exists())
    assert not missing, f"DEVELOPERS.md names paths that do not exist: {missing}"


def test_every_core_module_is_in_the_guide():
    text = (ROOT / "DEVELOPERS.md").read_text()
    named = _paths(text)
    core = sorted(str(p.relative_to(ROOT)) for p in (ROOT / "bridge").glob("*.py")
                  if p.name not in ("__init__.py", "__main__.py"))
    # modules named in the guide (directly or inside a {a,b} group)
    absent = [c for c in core if c not in named and Path(c).name not in text]
    assert not absent, f"core modules the guide does not place: {absent}"
