"""Notes for the user go through the standard logging module, under the ``geosim`` logger.

The aquifer sample's wells are longitude/latitude and its spec names no working CRS, so
every run of it chooses a UTM zone for the user and says so: that note is the probe here,
from a real run through the library and through the command line.
"""
from __future__ import annotations

import logging
import subprocess
import sys
import warnings
from pathlib import Path

import geosim
import geosim.config.runspec
import geosim.pipeline

AQUIFER = Path(__file__).resolve().parent.parent / "sample_fields" / "alluvial_aquifer" / "run.toml"
SMALL = {"grid.cell": [250.0, 250.0], "simulation.realizations": 2, "simulation.workers": 1,
         "outputs.plots": False, "outputs.cross_validation": False, "outputs.estimate": False}
UTM_NOTE = "reprojected EPSG:4326 -> EPSG:32725 (UTM zone of the data centroid)"


def test_a_real_run_logs_its_notes_and_raises_no_python_warning(tmp_path, caplog):
    spec = geosim.config.runspec.load_spec(AQUIFER, SMALL)
    with caplog.at_level(logging.INFO, logger="geosim"), warnings.catch_warnings():
        warnings.simplefilter("error", geosim.GeosimWarning)  # a note is not also a Python warning
        result = geosim.pipeline.run(spec, tmp_path / "run")
    notes = [r for r in caplog.records if r.levelno == logging.WARNING and UTM_NOTE in r.getMessage()]
    assert len(notes) == 1 and notes[0].name == "geosim.crs"  # a child of "geosim": one switch for all
    # the run's steps and timings are INFO records of the same logger
    steps = [r.getMessage() for r in caplog.records if r.levelno == logging.INFO and r.name == "geosim"]
    assert any(m.startswith("simulation: ") for m in steps)
    assert any(UTM_NOTE in n for n in result.notes)


def test_notes_are_silenced_or_captured_with_logging_alone(tmp_path):
    spec = geosim.config.runspec.load_spec(AQUIFER, SMALL)
    logger = logging.getLogger("geosim")
    seen: list[logging.LogRecord] = []
    catch = logging.Handler()
    catch.emit = seen.append
    logger.addHandler(catch)
    level = logger.level
    try:
        logger.setLevel(logging.ERROR)
        geosim.pipeline.prepare_data(spec)
        assert seen == []
        logger.setLevel(logging.WARNING)
        geosim.pipeline.prepare_data(spec)
        assert [r.getMessage() for r in seen] == [UTM_NOTE + "; give a target CRS to choose another"]
    finally:
        logger.removeHandler(catch)
        logger.setLevel(level)


def test_without_logging_configured_python_prints_the_notes_on_stderr():
    # a fresh interpreter: no handler anywhere, so Python's last-resort handler shows WARNING records
    code = ("import geosim.config.runspec, geosim.pipeline; "
            f"geosim.pipeline.prepare_data(geosim.config.runspec.load_spec({str(AQUIFER)!r}))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stderr.count(UTM_NOTE) == 1 and "Warning" not in done.stderr


def test_the_command_line_shows_the_note_once_in_its_own_look(tmp_path):
    from click.testing import CliRunner

    from geosim_cli.main import cli
    args = ["run", str(AQUIFER), "--out", str(tmp_path / "run")]
    for key, value in SMALL.items():
        args += ["--set", f"{key}={str(value).lower() if isinstance(value, bool) else value}"]
    result = CliRunner().invoke(cli, ["-q"] + args, prog_name="geosim")
    assert result.exit_code == 0, result.output
    lines = [line for line in result.stderr.splitlines() if UTM_NOTE in line]
    assert lines == [f"geosim: note: {UTM_NOTE}; give a target CRS to choose another"]
    assert "Warning" not in result.stderr and geosim.CAUTION in result.stderr
