"""Progress in notebooks (tqdm) and logs, and a run's notes on the "geosim" logger."""
import io
import logging
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import geosim
import geosim.pipeline
import geosim.progress
from geosim.config.runspec import load_spec

AQUIFER = Path(__file__).resolve().parent.parent / "sample_fields" / "alluvial_aquifer" / "run.toml"
SMALL = {"grid.cell": [200.0, 200.0], "simulation.realizations": 3, "simulation.workers": 1,
         "outputs.plots": False}


def test_tqdm_bars_follow_the_runner():
    pytest.importorskip("tqdm")
    buf = io.StringIO()
    grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (12, 12))
    model = geosim.Model([geosim.Spherical(1.0, geosim.Anisotropy((60.0, 60.0)))])
    fields = geosim.simulate(np.array([[55.0, 55.0]]), np.array([0.5]), model, grid, n_realizations=4, seed=3,
                             workers=1, progress=geosim.progress.tqdm_progress(notebook=False, file=buf))
    assert len(fields) == 4
    text = buf.getvalue()
    assert "realizations: 100%" in text and "4/4" in text


def test_logging_progress_writes_to_the_geosim_logger(caplog):
    report = geosim.progress.logging_progress(every=0.25)
    with caplog.at_level(logging.INFO, logger="geosim"):
        for done in range(1, 9):
            report(done, 8, "kriging")
    assert [r.getMessage() for r in caplog.records] == [f"kriging: {d} of 8" for d in (2, 4, 6, 8)]


def test_a_run_logs_its_notes_and_the_command_line_keeps_its_look(tmp_path, caplog):
    spec = load_spec(AQUIFER, overrides=SMALL)
    with caplog.at_level(logging.INFO, logger="geosim"):
        geosim.pipeline.run(spec, tmp_path / "run")
    messages = [r.getMessage() for r in caplog.records if r.name == "geosim"]
    assert any(m.startswith("cell declustering") for m in messages)
    assert any(m.startswith("Grid(") and "EPSG:32725" in m for m in messages)
    cmd = [sys.executable, "-c", "import sys; from geosim_cli.main import main; sys.exit(main())"]
    sets = [a for k, v in SMALL.items() for a in ("--set", f"{k}={str(v).lower()}")]
    plain = subprocess.run(cmd + ["-q", "run", str(AQUIFER), "--out", str(tmp_path / "a"), *sets],
                           capture_output=True, text=True, timeout=300)
    debug = subprocess.run(cmd + ["-q", "--debug", "run", str(AQUIFER), "--out", str(tmp_path / "b"), *sets],
                           capture_output=True, text=True, timeout=300)
    assert plain.returncode == debug.returncode == 0, plain.stderr + debug.stderr
    assert "geosim: cell declustering" not in plain.stderr
    assert "geosim: cell declustering" in debug.stderr
