"""The sample fields ship as package data: listed, copied and runnable without a clone."""
import subprocess
import sys
from pathlib import Path

import pytest

import geosim.demo
from geosim.config.runspec import load_spec
from geosim.errors import InputError

CLONE = Path(__file__).resolve().parent.parent / "sample_fields"


def test_installed_samples_are_the_clone_s_files(tmp_path):
    assert geosim.demo.sample_names() == ["alluvial_aquifer", "ore_prospect"]
    for name in geosim.demo.sample_names():
        folder = geosim.demo.copy_sample(name, tmp_path / name)
        for original in (CLONE / name).iterdir():
            assert (folder / original.name).read_bytes() == original.read_bytes(), original.name
        spec = load_spec(folder / "run.toml")  # the copied spec finds its data beside it
        assert all(p.is_file() for p in spec.input_files().values())


def test_copy_refuses_an_existing_folder_and_unknown_names(tmp_path):
    with pytest.raises(InputError, match="already exists"):
        geosim.demo.copy_sample("ore_prospect", tmp_path)
    with pytest.raises(InputError, match="did you mean 'ore_prospect'"):
        geosim.demo.copy_sample("ore_prospekt", tmp_path / "x")
    assert not (tmp_path / "x").exists()


def test_command_lists_copies_and_the_copy_checks(tmp_path):
    cmd = [sys.executable, "-c", "import sys; from geosim_cli.main import main; sys.exit(main())"]
    listed = subprocess.run(cmd + ["samples"], capture_output=True, text=True, timeout=120)
    assert listed.returncode == 0 and listed.stdout.split() == ["alluvial_aquifer", "ore_prospect"]
    copied = subprocess.run(cmd + ["samples", "alluvial_aquifer", str(tmp_path / "aq")], capture_output=True,
                            text=True, timeout=120)
    assert copied.returncode == 0, copied.stderr
    assert "geosim run" in copied.stdout and copied.stderr.rstrip().endswith(geosim.CAUTION)
    checked = subprocess.run(cmd + ["check", str(tmp_path / "aq" / "run.toml")], capture_output=True, text=True,
                             timeout=300)
    assert checked.returncode == 0, checked.stderr
