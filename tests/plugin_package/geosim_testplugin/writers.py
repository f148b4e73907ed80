"""A third-party writer: each realization to a NumPy .npy file."""
from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numpy as np


class NpyWriter:
    """Picklable sink: ``writer(index, field)`` writes ``r0007.npy`` atomically."""

    def __init__(self, folder, grid=None, metadata=None, *, overwrite=False):
        self.folder = Path(folder)
        self.overwrite = overwrite

    def __call__(self, index: int, field: np.ndarray) -> dict:
        self.folder.mkdir(parents=True, exist_ok=True)
        path = self.folder / f"r{index:04d}.npy"
        if path.exists() and not self.overwrite:
            raise FileExistsError(f"{path} exists; pass overwrite=True to replace it")
        tmp = path.with_name(path.name + ".part")
        with open(tmp, "wb") as f:
            np.save(f, field)
        os.replace(tmp, path)
        return {"index": index, "path": str(path), "sha256": hashlib.sha256(path.read_bytes()).hexdigest()}

    def finish(self, records: list) -> list:
        return sorted(records, key=lambda rec: rec["index"])
