"""Mode comparison: MAC, pairing, repeated-mode clusters, mapping between meshes.

The names below are imported on first use: ``mapping`` and ``pairing`` pull in scipy (about
1 s of imports), which a submodule such as ``bridge.compare.convergence`` does not need.
"""

from importlib import import_module

__all__ = ["mac_matrix", "auto_mac", "map_shapes", "pair_modes", "find_clusters", "compare_modes",
           "Pair", "Cluster", "Comparison"]

_WHERE = {"mac_matrix": "mac", "auto_mac": "mac", "map_shapes": "mapping", "pair_modes": "pairing",
          "find_clusters": "pairing", "compare_modes": "pairing", "Pair": "pairing", "Cluster": "pairing",
          "Comparison": "pairing"}


def __getattr__(name: str):
    if name in _WHERE:
        return getattr(import_module(f".{_WHERE[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
