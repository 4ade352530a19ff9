"""ohmgraph.datasets: deterministic network generators and small example files."""

from ohmgraph.datasets.generators import (grid2d, grid3d, knn_network, knn_points, ladder,
                                          layered_mesh, scale_free, small_world)

__all__ = ["grid2d", "grid3d", "ladder", "layered_mesh", "knn_network", "knn_points",
           "small_world", "scale_free"]
