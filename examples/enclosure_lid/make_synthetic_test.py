"""Make the SYNTHETIC hammer-test data of the enclosure-lid example.

No lid was tested: the "measured" modes are computed from a perturbed model of the lid —
Young's modulus 3 % lower, a latch 20 % heavier, another mesh (quad8 30 × 21) — sampled at a
5 × 4 grid of impact points, with 2 % noise on the shapes, a small random phase on each value
(complex modes, as a curve fitter returns them), 0.6–1.2 % damping, written in the test
crew's frame (see frame.toml: z points down into the lid) in millimetres. The data of two
impact points were swapped in the "test log" (points 7 and 14) so that CoMAC has something to
find.

Run from the repository root:

    .venv/bin/python examples/enclosure_lid/make_synthetic_test.py
"""

from __future__ import annotations

import tempfile
import tomllib
from pathlib import Path

import numpy as np

from bridge.modaltest.locate import locate_on_model, model_at
from bridge.modaltest.measured import MeasuredModes, Placement
from bridge.modaltest.uff import write_uff
from bridge.pipeline import run_model

HERE = Path(__file__).resolve().parent


def main() -> None:
    text = (HERE / "lid.toml").read_text(encoding="utf-8")
    assert tomllib.loads(text)["materials"]["al5052"]["youngs_modulus"] == "70.3 GPa"
    perturbed = (text.replace('"70.3 GPa"', '"68.191 GPa"')  # × 0.97
                 .replace('mass = "0.05 kg"', 'mass = "0.06 kg"')
                 .replace("divisions = [20, 14]", "divisions = [30, 21]")
                 .replace('name = "instrument enclosure lid"', 'name = "instrument enclosure lid, perturbed"'))
    with tempfile.TemporaryDirectory(prefix="modebridge-lid-") as tmp:
        work = Path(tmp)
        (work / "perturbed.toml").write_text(perturbed, encoding="utf-8")
        _, (out,) = run_model(work / "perturbed.toml", work / "run", solvers=["calculix"])
    if not out.ok:
        raise SystemExit(f"the perturbed model failed: {out.error}")
    r = out.result
    xs = np.linspace(25, 175, 5) * 1e-3
    ys = np.linspace(20, 120, 4) * 1e-3
    P = np.array([[x, y, 0.0] for y in ys for x in xs])
    D = np.tile([0.0, 0.0, -1.0], (len(P), 1))  # the test's +z points down: the part's −z
    modes = np.arange(6)  # the lab identified the first six modes
    S = model_at(r, locate_on_model(r, P), D, modes)
    rng = np.random.default_rng(14)
    S = S + 0.02 * np.abs(S).max(axis=1, keepdims=True) * rng.standard_normal(S.shape)
    S = S * np.exp(1j * 0.05 * rng.standard_normal(S.shape))  # complex, nearly monophase
    labels = [str(i + 1) for i in range(len(P))]
    S[:, [6, 13]] = S[:, [13, 6]]  # the swap in the test log: point 7's data filed under 14 and back
    pl = Placement(np.column_stack([[1.0, 0, 0], [0, -1.0, 0], [0, 0, -1.0]]), np.array([0.0, 0.14, 0.0]))
    m = MeasuredModes(points=P, directions=D, point_labels=labels, frequencies=r.frequencies[modes],
                      shapes=S.real, damping=rng.uniform(0.006, 0.012, len(modes)), length_unit="mm", placement=pl)
    path = write_uff(m, HERE / "hammer_test_SYNTHETIC.uff", title="SYNTHETIC hammer test of the lid (perturbed model)")
    # the UFF writer stores real shapes; write the complex ones into the same datasets 55 by pyuff
    import pyuff

    sets = pyuff.UFF(str(path)).read_sets()
    k = 0
    for s in sets:
        if s["type"] == 55:
            nodes = [str(int(n)) for n in s["node_nums"]]
            z = np.array([S[k, labels.index(n)] for n in nodes])
            s["r3"] = -z  # along the test's +z: the part's −z shape, measured along the test's z axis
            s["r1"] = s["r1"].astype(complex)
            s["r2"] = s["r2"].astype(complex)
            s["analysis_type"] = 3  # complex eigenvalue, first order
            lam = -m.damping[k] * 2 * np.pi * m.frequencies[k] + 1j * 2 * np.pi * m.frequencies[k] * np.sqrt(
                1 - m.damping[k] ** 2)
            s["eig"] = lam
            s["modal_a"] = 0j
            s["modal_b"] = 0j
            s["data_type"] = 5
            for key in ("freq", "modal_m", "modal_damp_vis", "modal_damp_his"):
                s.pop(key, None)
            k += 1
    path.unlink()
    pyuff.UFF(str(path)).write_sets(sets, mode="overwrite")
    print(f"wrote {path} ({len(P)} points, {len(modes)} complex modes; SYNTHETIC)")


if __name__ == "__main__":
    main()
