"""ohmgraph.io: everything that touches the outside world.

Readers and writers, the HDF5 store, the command-line interface and terminal output.
"""

from ohmgraph.io.export import load_branches, load_nodes
from ohmgraph.io.reader import read_network, read_network_file
from ohmgraph.io.store import read_solution, write_solution

__all__ = ["read_network", "read_network_file", "read_solution", "write_solution",
           "load_nodes", "load_branches"]
