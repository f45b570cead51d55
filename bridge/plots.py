"""Plots (matplotlib with the Agg backend: no display needed)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .io import atomic_path

__all__ = ["mac_heatmap"]


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def mac_heatmap(mac: np.ndarray, fa, fb, pairs: list[tuple[int, int]], path: str | Path,
                label_a: str = "A", label_b: str = "B", title: str = "MAC") -> Path:
    """MAC matrix as a heat map with paired cells outlined; axes carry mode number and frequency."""
    plt = _pyplot()
    m, k = mac.shape
    fig, ax = plt.subplots(figsize=(1.2 + 0.45 * k, 1.0 + 0.42 * m), dpi=110)
    im = ax.imshow(mac, vmin=0, vmax=1, cmap="cividis", origin="upper")
    for i, j in pairs:
        ax.add_patch(plt.Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, edgecolor="#e8590c", lw=2.2))
    for i in range(m):
        for j in range(k):
            if mac[i, j] >= 0.05:
                ax.text(j, i, f"{mac[i, j]:.2f}", ha="center", va="center", fontsize=7,
                        color="black" if mac[i, j] > 0.6 else "white")
    ax.set_xticks(range(k), [f"{j + 1}\n{f:.0f}" for j, f in enumerate(fb)], fontsize=7)
    ax.set_yticks(range(m), [f"{i + 1}  {f:.0f}" for i, f in enumerate(fa)], fontsize=7)
    ax.set_xlabel(f"{label_b}: mode / Hz")
    ax.set_ylabel(f"{label_a}: mode / Hz")
    ax.set_title(title, fontsize=10)
    fig.colorbar(im, ax=ax, fraction=0.046, pad=0.04)
    fig.tight_layout()
    path = Path(path)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png")
    plt.close(fig)
    return path
