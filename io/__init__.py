"""ohmgraph.io: everything that touches the outside world.

Readers and writers, the HDF5 store, the command-line interface and terminal output.
"""
