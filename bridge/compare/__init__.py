"""Mode comparison: MAC, pairing, repeated-mode clusters, mapping between meshes."""

from .mac import auto_mac, mac_matrix
from .mapping import map_shapes
from .pairing import Cluster, Comparison, Pair, compare_modes, find_clusters, pair_modes

__all__ = ["mac_matrix", "auto_mac", "map_shapes", "pair_modes", "find_clusters", "compare_modes",
           "Pair", "Cluster", "Comparison"]
