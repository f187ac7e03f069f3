"""Reading and writing epoch-set files."""

from worker.engine.io.npz import read_npz, write_npz

__all__ = ["read_npz", "write_npz"]
