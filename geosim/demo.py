"""The invented sample fields that ship with geosim, reachable after a plain ``pip install``.

They are installed as the package data ``geosim.sample_fields`` (the ``sample_fields/``
folder of a clone).  :func:`copy_sample` copies one, with its run spec, into a folder
of the user's, where ``geosim run <folder>/run.toml`` runs it; the command line does
the same with ``geosim samples NAME FOLDER``.

Examples
--------
>>> import pathlib, tempfile
>>> import geosim.demo
>>> geosim.demo.sample_names()
['alluvial_aquifer', 'ore_prospect']
>>> folder = geosim.demo.copy_sample("alluvial_aquifer", pathlib.Path(tempfile.mkdtemp()) / "aquifer")
>>> sorted(p.name for p in folder.iterdir())
['README.md', 'domain.geojson', 'planned_wells.csv', 'resistivity_survey.tif', 'run.toml', 'run_secondary.toml',
 'run_units.toml', 'true_model.json', 'units.tif', 'units_true_model.json', 'wells.csv', 'wells_units.csv']
"""
from __future__ import annotations

import os
import shutil
from importlib import resources
from pathlib import Path

from .errors import InputError

__all__ = ["sample_names", "sample_folder", "copy_sample"]

_PACKAGE = "geosim.sample_fields"


def _root():
    try:
        return resources.files(_PACKAGE)
    except ModuleNotFoundError:
        # imported from a source tree (e.g. tests run in a clone beside a regular install):
        # the package's folder is then the clone's sample_fields/, next to geosim/
        clone = Path(__file__).resolve().parent.parent / "sample_fields"
        if (clone / "__init__.py").is_file():
            return clone
        raise InputError("the sample fields are not installed with this geosim",
                         fix="reinstall geosim (pip install --force-reinstall geosim)") from None


def sample_names() -> list[str]:
    """The sample fields shipped, by folder name."""
    return sorted(p.name for p in _root().iterdir() if p.is_dir() and (p / "run.toml").is_file())


def sample_folder(name: str):
    """The installed folder of one sample field (a :class:`importlib.resources` traversable)."""
    names = sample_names()
    if name not in names:
        from .tables import suggest
        raise InputError(f"no sample field named {name!r}", field="name",
                         fix=f"{suggest(name, names)} sample fields: {', '.join(names)}".strip())
    return _root() / name


def copy_sample(name: str, folder: str | os.PathLike, *, overwrite: bool = False) -> Path:
    """Copy sample field ``name`` (data, domain, run spec, README) into ``folder``.

    The folder is created; an existing one is refused unless ``overwrite``, in which
    case the sample's files replace their namesakes there.  Returns the folder.
    """
    source = sample_folder(name)
    folder = Path(folder)
    if folder.exists() and not overwrite:
        raise InputError("the folder already exists", file=str(folder),
                         fix="choose a new folder, or pass overwrite=True / --overwrite")
    folder.mkdir(parents=True, exist_ok=True)
    for item in source.iterdir():
        if item.is_file():
            with resources.as_file(item) as path:
                shutil.copyfile(path, folder / item.name)
    return folder
