"""Who owns an output folder, and what a rerun may keep: the run state of a geosim run.

Output folders
--------------
A folder belongs to one run spec, and to one run at a time: every step that writes
holds the folder's lock (:func:`with_folder_lock`, :mod:`geosim.io.lock`), so a
second concurrent run into it is refused.  Every step that writes
(``out_dir=...``) first checks the folder is new, empty, or holds a run of the
same spec (:func:`claim_folder`, :func:`open_output`), then replaces its own
earlier outputs there and lists what it wrote in ``run-state/outputs.json``
(:func:`record_outputs`).  ``overwrite=True`` takes over a folder holding another
spec's run or other files: every file the old run wrote is removed first (so a 2-D
run replacing a 3-D one leaves no level files behind), and files it did not write
are left alone.

Resume
------
The output folder holds ``run-state/``: ``run.json`` (the spec's hashes, seed,
input checksums) and one ``r#####.json`` record per finished realization, written
atomically by the worker right after the realization's GeoTIFF
(:class:`RecordingSink`).  A rerun with the same spec verifies each recorded file
by SHA-256 (:func:`completed_realizations`) and computes only the missing
realizations; since realization ``i`` depends only on the seed and ``i``, the
result equals an uninterrupted run.  The realization count, workers and cluster
may change between runs (so a run can be extended); anything else makes the
folder belong to another run, which is an error unless ``overwrite``.
"""
from __future__ import annotations

import json
import os
import shutil
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from .config.runspec import RunSpec, canonical_json
from .errors import InputError
from .io.atomic import atomic_output
from .io.lock import LOCK_NAME

__all__ = ["STATE_DIR", "resume_key", "with_folder_lock", "make_folder", "claim_folder", "open_output",
           "read_header", "completed_realizations", "RecordingSink", "record_outputs", "folder_is_empty",
           "empty_folder", "input_checksums"]

STATE_DIR = "run-state"
_STATE_FORMAT = 1
# keys a resumed run may change: realization i depends only on the seed and i, and the realization
# cube's compression changes how the finished realizations are stored, not what they are
_RESUMABLE_CHANGES = ("simulation.realizations", "outputs.realization_cube_zlib")


def with_folder_lock(step):
    """Hold the output folder's lock (:mod:`geosim.io.lock`) while ``step`` writes into its
    ``out_dir``: one run per folder."""
    import functools
    import inspect
    signature = inspect.signature(step)

    @functools.wraps(step)
    def locked(*args, **kwargs):
        out_dir = signature.bind(*args, **kwargs).arguments.get("out_dir")
        if out_dir is None:
            return step(*args, **kwargs)
        from .io.lock import folder_lock
        with folder_lock(out_dir):
            result = step(*args, **kwargs)
            files = result if isinstance(result, dict) else getattr(result, "files", None)
            if files:
                record_outputs(Path(out_dir), [p for group in files.values() for p in group])
            return result
    return locked


OUTPUTS_FILE = "outputs.json"


def record_outputs(out_dir: Path, paths) -> None:
    """Add ``paths`` (files a step wrote into ``out_dir``) to the run state's list of
    outputs, ``run-state/outputs.json``, so that replacing the run removes them."""
    base = Path(out_dir).resolve()
    listed = set(_recorded_outputs(out_dir))
    for p in paths:
        try:
            listed.add(Path(p).resolve().relative_to(base).as_posix())
        except ValueError:  # written elsewhere: not this folder's to remove
            continue
    _write_json(Path(out_dir) / STATE_DIR / OUTPUTS_FILE, {"outputs": sorted(listed)})


def _recorded_outputs(out_dir: Path) -> list[str]:
    try:
        return list(json.loads((Path(out_dir) / STATE_DIR / OUTPUTS_FILE).read_text())["outputs"])
    except (OSError, ValueError, KeyError, TypeError):
        return []


def _remove_run(out_dir: Path) -> None:
    """Remove every file the run in ``out_dir`` wrote (its recorded outputs, their CSV
    metadata sidecars, its realizations) and its run state; nothing else."""
    from .io.csvw import sidecar_path
    base = out_dir.resolve()
    for rel in _recorded_outputs(out_dir):
        path = (out_dir / rel).resolve()
        if base in path.parents:  # a hand-edited list must not reach outside the folder
            if path.is_dir():  # a Zarr store
                shutil.rmtree(path)
            path.unlink(missing_ok=True)
            if path.suffix == ".csv":
                sidecar_path(path).unlink(missing_ok=True)
    shutil.rmtree(out_dir / STATE_DIR)
    shutil.rmtree(out_dir / "realizations", ignore_errors=True)


def make_folder(out_dir) -> Path:
    """``out_dir`` as a Path, created with its parents if missing."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    return out_dir


def claim_folder(spec: RunSpec, out_dir, overwrite: bool) -> Path:
    """Create ``out_dir`` and check it belongs to this spec (see :func:`open_output`); the
    step may then replace its own earlier outputs there."""
    out_dir = make_folder(out_dir)
    open_output(spec, out_dir, overwrite=overwrite, resume=True)
    return out_dir



def resume_key(spec: RunSpec) -> str:
    """SHA-256 of the spec without the keys a resumed run may change (the realization count)."""
    import hashlib
    values = spec.to_dict()
    for dotted in _RESUMABLE_CHANGES:
        section, key = dotted.split(".")
        values[section].pop(key, None)
    return hashlib.sha256(canonical_json(values).encode()).hexdigest()


def input_checksums(spec: RunSpec) -> dict[str, str]:
    """{spec key: SHA-256} of every input file the spec names: the run state compares them on a
    rerun, and the outputs' provenance lists them."""
    from .io.report import file_sha256
    return {key: file_sha256(path) for key, path in spec.input_files().items()}


def _write_json(path: Path, payload: Mapping, overwrite: bool = True, indent: int | None = 1) -> None:
    with atomic_output(path, overwrite=overwrite) as tmp:
        tmp.write_text(json.dumps(payload, indent=indent, default=_plain))  # key order matters for figures


def _plain(obj):
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"cannot write {type(obj).__name__} to JSON")


def _differences(old: Mapping, new: Mapping) -> list[str]:
    keys = sorted(set(old) | set(new))
    return [k for k in keys if old.get(k) != new.get(k)]


def folder_is_empty(out_dir: Path) -> bool:
    """Whether ``out_dir`` holds nothing (but possibly its lock file)."""
    return not any(p.name != LOCK_NAME for p in out_dir.iterdir())


def empty_folder(out_dir: Path) -> None:
    """Remove everything in ``out_dir`` but its lock file: undo a run that failed in a folder
    it found empty, so the corrected spec can use the folder without ``overwrite``."""
    for path in out_dir.iterdir():
        if path.name != LOCK_NAME:
            shutil.rmtree(path) if path.is_dir() else path.unlink()


def open_output(spec: RunSpec, out_dir: Path, *, overwrite: bool, resume: bool) -> dict:
    """Check the output folder belongs to this run (or is new); return the run-state header."""
    state_dir = out_dir / STATE_DIR
    header = {"format": _STATE_FORMAT, "spec_sha256": spec.sha256, "resume_key": resume_key(spec),
              "seed": spec["simulation.seed"], "inputs": input_checksums(spec),
              "spec": json.loads(canonical_json(spec.values))}
    state_file = state_dir / "run.json"
    if state_file.is_file():
        old = read_header(out_dir) or {}
        same = (old.get("format") == _STATE_FORMAT and old.get("resume_key") == header["resume_key"]
                and old.get("seed") == header["seed"] and old.get("inputs") == header["inputs"])
        if not same and not overwrite:
            what = []
            if old.get("inputs") != header["inputs"]:
                what.append("input files " + ", ".join(_differences(old.get("inputs", {}), header["inputs"])))
            changed = _differences(old.get("spec", {}), header["spec"])
            if changed:
                what.append("spec sections [" + "], [".join(changed) + "]")
            raise InputError("the output folder holds a run of a different spec or different inputs"
                             + (f" (changed: {'; '.join(what)})" if what else ""), file=str(out_dir),
                             fix="choose another --out folder, or pass --overwrite to replace that run")
        if not same or not resume:
            # the folder is this run's to replace: forget the old records and realization files
            _remove_run(out_dir)
    elif out_dir.is_dir() and any(p.name != LOCK_NAME for p in out_dir.iterdir()) and not overwrite:
        raise InputError("the output folder is not empty and holds no geosim run state", file=str(out_dir),
                         fix="choose a new or empty --out folder, or pass --overwrite")
    state_dir.mkdir(parents=True, exist_ok=True)
    _sweep_temporaries(out_dir)
    _write_json(state_file, header)
    return header


def _sweep_temporaries(out_dir: Path) -> None:
    """Remove the hidden temporary files (and Zarr folders) a killed run may have left (atomic
    writes that never reached their rename); finished files are never touched."""
    for folder in (out_dir, out_dir / "realizations", out_dir / STATE_DIR):
        for pattern in (".*.partial*", ".*.stage.tif"):
            for path in folder.glob(pattern):
                shutil.rmtree(path, ignore_errors=True) if path.is_dir() else path.unlink(missing_ok=True)


def read_header(out_dir: Path) -> dict | None:
    """The run-state header of ``out_dir`` (see :func:`open_output`), or None if there is none."""
    try:
        return json.loads((out_dir / STATE_DIR / "run.json").read_text())
    except (OSError, ValueError):
        return None


def completed_realizations(out_dir: Path, header: Mapping, n_realizations: int) -> dict[int, dict]:
    """Records of realizations already written by an earlier run of this spec, verified by checksum.

    A realization in a realization store (:class:`geosim.io.cube.RealizationStore`) is kept
    when the store is this run's, marks it complete and holds data with the record's SHA-256.
    """
    from .ensemble import record_files, record_stores
    from .io.cube import stored_realization_ok
    from .io.geotiff import verify_realization
    kept = {}
    for path in sorted((out_dir / STATE_DIR).glob("r[0-9]*.json")):
        try:
            rec = json.loads(path.read_text())
        except (OSError, ValueError):
            continue
        index = rec.get("index")
        if (not isinstance(index, int) or index >= n_realizations or rec.get("resume_key") != header["resume_key"]
                or rec.get("seed") != header["seed"]):
            continue
        record = rec.get("record", {})
        files, stores = record_files(record), record_stores(record)
        if (record.get("files") or stores) and all(verify_realization(out_dir / f, sha) for f, sha in files) \
                and all(stored_realization_ok(out_dir / p, index, sha, header["resume_key"]) for p, sha in stores):
            kept[index] = record
    return kept


class RecordingSink:
    """Picklable sink: runs the writer in the worker, then records the result atomically
    in ``run-state/`` so an interrupted run can keep it."""

    def __init__(self, writer, state_dir: str | os.PathLike, resume_key: str, seed: int):
        self.writer = writer
        self.state_dir = Path(state_dir)
        self.resume_key = resume_key
        self.seed = seed

    def pool_modules(self) -> list[str]:
        """The writer's (:func:`geosim.simulation.runner.pool_context`)."""
        return list(getattr(self.writer, "pool_modules", lambda: ())())

    def __call__(self, index: int, field: np.ndarray) -> dict:
        record = self.writer(index, field)
        # one line: json's compiled encoder (an indent takes the Python one, about 10x slower; a record
        # holds every realization's checks and figures, 0.05 s of CPU each with 3,000 data)
        _write_json(self.state_dir / f"r{int(index):05d}.json",
                    {"index": int(index), "resume_key": self.resume_key, "seed": self.seed, "record": record},
                    indent=None)
        return record
