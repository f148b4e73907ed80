"""The geosim command driven as a subprocess, end to end on the sample fields.

Grids are coarsened and realizations cut through ``--set`` so the whole module runs
in well under two minutes; the full-size demos are the run specs themselves.
"""
from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import geosim
from geosim.io.report import file_sha256

rasterio = pytest.importorskip("rasterio")

SAMPLES = Path(__file__).resolve().parent.parent / "sample_fields"
AQUIFER = SAMPLES / "alluvial_aquifer" / "run.toml"
ORE = SAMPLES / "ore_prospect" / "run.toml"
# 60 realizations on a 100 m grid: a few seconds of simulation, long enough to kill a run midway
AQUIFER_SMALL = ["--set", "grid.cell=[100.0, 100.0]", "--set", "simulation.realizations=60",
                 "--set", "outputs.plots=false", "--set", "simulation.workers=1"]
# the installed console script beside this interpreter; the same entry point through -c otherwise
_SCRIPT = Path(sys.executable).with_name("geosim")
GEOSIM = [str(_SCRIPT)] if _SCRIPT.is_file() else [
    sys.executable, "-c", "import sys; from geosim_cli.main import main; sys.exit(main())"]


def assert_plain_tables(out, expected):
    """Every CSV of a run reads with ``pandas.read_csv`` defaults into the columns its CSVW
    sidecar documents, with the caution there and no comment line in the table."""
    pd = pytest.importorskip("pandas")
    csvw = pytest.importorskip("csvw")
    found = sorted(p.relative_to(out).as_posix() for p in out.rglob("*.csv"))
    assert found == sorted(expected)
    for name in found:
        frame = pd.read_csv(out / name)
        meta = json.loads((out / (name + "-metadata.json")).read_text())
        assert meta["dc:description"] == geosim.CAUTION and meta["url"] == Path(name).name
        columns = [c["name"] for c in meta["tableSchema"]["columns"]]
        assert list(frame.columns) == columns, name
        assert len(frame) > 0 and not frame.columns[0].startswith("#")
        numeric = [c["name"] for c in meta["tableSchema"]["columns"] if c["datatype"] != "string"]
        assert all(frame[c].dtype.kind in "if" for c in numeric), name
        checked = csvw.CSVW(str(out / name), validate=True)
        assert checked.is_valid, [str(w.message) for w in checked.warnings]


def read_csv_metadata_columns(path):
    return {c["name"]: c.get("schema:unitText") for c in json.loads(path.read_text())["tableSchema"]["columns"]}


def geosim_cmd(*args, **kwargs):
    return subprocess.run(GEOSIM + [str(a) for a in args], capture_output=True, text=True, timeout=300,
                          **kwargs)


def band_values(path):
    with rasterio.open(path) as src:
        return src.read()


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """An uninterrupted run (on two worker processes: workers do not change the result)."""
    out = tmp_path_factory.mktemp("reference") / "run"
    args = AQUIFER_SMALL[:-2] + ["--set", "simulation.workers=2"]
    result = geosim_cmd("run", AQUIFER, "--out", out, *args)
    assert result.returncode == 0, result.stderr
    return out, result


def test_run_writes_described_outputs(reference):
    out, result = reference
    assert "run complete" in result.stdout and "60 (60 computed)" in result.stdout
    assert result.stderr.rstrip().endswith(geosim.CAUTION)
    with rasterio.open(out / "summary.tif") as src:
        assert src.crs.to_epsg() == 32725
        assert src.descriptions[0].lower().startswith("mean") and len(src.descriptions) == 5 + 3
        assert src.tags()["caution"] == geosim.CAUTION
        values = src.read(1)
        # nodata outside the valley polygon, values inside: the domain clipped the grid
        assert np.isnan(values).any() and np.isfinite(values).any()
    with rasterio.open(out / "realizations.tif") as src:
        assert src.count == 60
    report = json.loads((out / "report.json").read_text())
    assert report["caution"] == geosim.CAUTION
    assert report["realizations"]["count"] == 60 and report["run_spec_sha256"]
    assert (out / "run-state" / "run.json").is_file()
    assert_plain_tables(out, ["cross_validation.csv", "decision_figures.csv", "decision_spread.csv",
                              "upscaled/decision_figures.csv", "upscaled/decision_spread.csv", "ranking.csv",
                              "query_points.csv"])


def test_killed_run_resumes_and_equals_an_uninterrupted_run(tmp_path, reference):
    ref_out, _ = reference
    out = tmp_path / "run"
    proc = subprocess.Popen(GEOSIM + ["run", str(AQUIFER), "--out", str(out), *AQUIFER_SMALL],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    deadline = time.monotonic() + 240
    while time.monotonic() < deadline and proc.poll() is None:
        if len(list((out / "run-state").glob("r[0-9]*.json"))) >= 2:
            break
        time.sleep(0.01)
    assert proc.poll() is None, "the run finished before it could be killed"
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)

    # nothing corrupt is left: every visible realization file is complete and readable
    kept = {}
    for path in sorted((out / "realizations").glob("r*.tif")):
        band_values(path)
        kept[path.name] = (path.stat().st_mtime_ns, file_sha256(path))
    assert 2 <= len(kept) < 60
    # a realization counts as complete once its record is written (after its raster); a kill
    # between the two leaves a raster without a record, which the rerun must recompute
    recorded = {f"r{int(p.stem[1:]):04d}.tif" for p in (out / "run-state").glob("r[0-9]*.json")}
    assert len(recorded & set(kept)) >= 2
    assert not (out / "summary.tif").exists()

    result = geosim_cmd("run", AQUIFER, "--out", out, *AQUIFER_SMALL)
    assert result.returncode == 0, result.stderr
    n_kept = int(result.stdout.split("computed, ")[1].split(" kept")[0])
    assert n_kept >= 2
    for name, (mtime, sha) in kept.items():  # completed realizations were kept, not recomputed
        path = out / "realizations" / name
        if name in recorded:
            assert path.stat().st_mtime_ns == mtime and file_sha256(path) == sha
    assert not list(out.rglob(".*.partial*"))
    # bit-identical by seed to the uninterrupted run
    for name in ("realizations.tif", "summary.tif"):
        np.testing.assert_array_equal(band_values(out / name), band_values(ref_out / name), err_msg=name)


def test_another_spec_into_a_finished_folder_is_refused(reference):
    out, _ = reference
    result = geosim_cmd("run", AQUIFER, "--out", out, *AQUIFER_SMALL, "--set", "simulation.seed=1")
    assert result.returncode == 2
    assert "different spec" in result.stderr and "--overwrite" in result.stderr
    assert "[simulation]" in result.stderr


def test_bad_run_spec_stops_before_any_work(tmp_path):
    spec = tmp_path / "run.toml"
    text = AQUIFER.read_text().replace("realizations = 20", "realizations = 'many'")
    text = text.replace('kind = "exponential"', 'kind = "exponentail"')
    spec.write_text(text.replace('points = "wells.csv"', f'points = "{SAMPLES}/alluvial_aquifer/wells.csv"')
                    .replace('polygon = "domain.geojson"', 'polygon = "nowhere.geojson"'))
    out = tmp_path / "out"
    result = geosim_cmd("run", spec, "--out", out)
    assert result.returncode == 2
    for key in ("simulation.realizations: expected an integer", "variogram.structures[1].kind: expected one of",
                "domain.polygon: expected an existing file"):
        assert key in result.stderr, key
    assert "Traceback" not in result.stderr
    assert not out.exists()
    assert result.stderr.rstrip().endswith(geosim.CAUTION)


def test_bad_input_files_give_one_line_and_write_nothing(tmp_path):
    folder = tmp_path / "ore"
    shutil.copytree(SAMPLES / "ore_prospect", folder)
    rows = (folder / "assays.csv").read_text().splitlines()
    hole, frm, to, value = rows[10].split(",")
    rows[10] = ",".join([hole, to, frm, value])  # from > to
    (folder / "assays.csv").write_text("\n".join(rows) + "\n")
    out = tmp_path / "out"
    result = geosim_cmd("run", folder / "run.toml", "--out", out)
    assert result.returncode == 2
    errors = [line for line in result.stderr.splitlines() if line.startswith("geosim: error:")]
    assert len(errors) == 1 and "assays.csv" in errors[0] and "row 11" in errors[0], result.stderr
    assert not out.exists()

    (folder / "assays.csv").write_text((SAMPLES / "ore_prospect" / "assays.csv").read_text())
    (folder / "collars.csv").write_text((folder / "collars.csv").read_text().replace("hole_id,", "hole,", 1))
    result = geosim_cmd("check", folder / "run.toml")
    assert result.returncode == 2
    assert "collars.csv" in result.stderr and "hole_id" in result.stderr


def test_ore_prospect_3d_run(tmp_path):
    out = tmp_path / "ore"
    result = geosim_cmd("run", ORE, "--out", out, "--set", "grid.cell=[40.0, 40.0, 20.0]",
                        "--set", "simulation.realizations=3", "--set", "outputs.plots=false",
                        "--set", "simulation.workers=1")
    assert result.returncode == 0, result.stderr
    # 3-D: one NetCDF cube per output kind instead of one GeoTIFF per level
    assert not list(out.glob("*.tif"))
    with rasterio.open(f"netcdf:{out / 'summary.nc'}:mean") as src:
        assert src.crs.to_epsg() == 32750 and src.count == 13  # z_range 100-360 m in 20 m levels
    spread = (out / "decision_spread.csv").read_text()
    assert "tonnage" in spread and "mean_grade" in spread
    assert_plain_tables(out, ["block_model.csv", "cross_validation.csv", "decision_figures.csv",
                              "decision_spread.csv", "blocks/block_model.csv", "blocks/decision_figures.csv",
                              "blocks/decision_spread.csv",
                              "ranking.csv", "query_points.csv"])
    metal = read_csv_metadata_columns(out / "decision_spread.csv-metadata.json")
    assert metal["cutoff"] == "% Cu"
    assert "tonnage at cutoff 0.3" in result.stdout


def test_simulate_on_a_dask_cluster_equals_serial(tmp_path):
    from click.testing import CliRunner

    from geosim_cli.main import cli

    distributed = pytest.importorskip("dask.distributed")
    small = ["--set", "grid.cell=[200.0, 200.0]", "--set", "simulation.realizations=3",
             "--set", "variogram.fit=false"]
    # in this process: the Dask workers are processes of their own, a geosim subprocess adds only start-up
    runner = CliRunner()
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as cluster:
        remote = runner.invoke(cli, ["simulate", str(AQUIFER), "--out", str(tmp_path / "dask"), "--cluster",
                                     cluster.scheduler_address, *small])
    assert remote.exit_code == 0, remote.stderr
    assert "3 (3 computed, 0 kept)" in remote.stdout
    serial = runner.invoke(cli, ["simulate", str(AQUIFER), "--out", str(tmp_path / "serial"), "--workers", "1",
                                 *small])
    assert serial.exit_code == 0, serial.stderr
    for i in range(3):
        name = f"realizations/r{i:04d}.tif"
        np.testing.assert_array_equal(band_values(tmp_path / "dask" / name), band_values(tmp_path / "serial" / name))
    summary = runner.invoke(cli, ["summarize", str(AQUIFER), "--out", str(tmp_path / "dask"), *small])
    assert summary.exit_code == 0, summary.stderr
    assert (tmp_path / "dask" / "summary.tif").is_file()
