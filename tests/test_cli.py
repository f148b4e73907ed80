"""The geosim click group in-process: command loading, exit codes, error lines, caution, progress."""
from __future__ import annotations

import io
import textwrap
from pathlib import Path

import pytest
from click.testing import CliRunner

import geosim
from geosim_cli import progress as progress_module
from geosim_cli.main import cli, main
from geosim_cli.progress import ProgressReporter

SAMPLES = Path(__file__).resolve().parent.parent / "sample_fields"
AQUIFER = SAMPLES / "alluvial_aquifer" / "run.toml"
BUILT_IN = {"check", "explore", "variogram", "crossvalidate", "estimate", "simulate", "summarize", "run"}


def invoke(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], prog_name="geosim")


@pytest.fixture
def extra_commands(tmp_path, monkeypatch):
    """A real entry-point registration of three third-party commands (a .dist-info folder on
    sys.path, which importlib.metadata reads), one of them pointing at a missing module."""
    (tmp_path / "geosim_test_commands.py").write_text(textwrap.dedent("""
        import click
        from geosim.errors import NotPositiveDefiniteError
        from geosim_cli.common import session

        @click.command("singular")
        @click.pass_context
        def singular(ctx):
            session(ctx)
            raise NotPositiveDefiniteError(3, -0.5, ids=["DH7#2", "DH7#3"], context="test system")

        @click.command("explode")
        @click.pass_context
        def explode(ctx):
            session(ctx)
            raise RuntimeError("a bug deep inside")
        """))
    info = tmp_path / "geosim_test_commands-0.1.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: geosim-test-commands\nVersion: 0.1\n")
    (info / "entry_points.txt").write_text(textwrap.dedent("""
        [geosim.commands]
        singular = geosim_test_commands:singular
        explode = geosim_test_commands:explode
        vanished = geosim_test_commands_missing:command
        """))
    monkeypatch.syspath_prepend(str(tmp_path))
    return tmp_path


def test_help_lists_the_commands_loaded_through_entry_points():
    result = invoke("--help")
    assert result.exit_code == 0
    listed = {line.split()[0] for line in result.stdout.split("Commands:")[1].splitlines() if line.strip()
              and not line.startswith("    ")}
    assert BUILT_IN <= listed


def test_check_keys_prints_the_reference_without_a_spec():
    result = invoke("check", "--keys")
    assert result.exit_code == 0
    assert "[simulation]" in result.stdout and "  seed  an integer >= 0" in result.stdout


def test_unknown_command_suggests_the_closest():
    result = invoke("simulat")
    assert result.exit_code == 2
    assert "Did you mean 'simulate'?" in result.stderr


def test_version():
    result = invoke("--version")
    assert result.exit_code == 0 and result.stdout.strip() == f"geosim {geosim.__version__}"


def test_bad_spec_lists_every_problem_and_exits_2(tmp_path):
    spec = tmp_path / "run.toml"
    spec.write_text('[data]\npoints = "none.csv"\n[simulation]\nrealizations = -1\n')
    result = invoke("check", spec)
    assert result.exit_code == 2
    lines = result.stderr.splitlines()
    assert lines[0].startswith(f"geosim: error: {spec}:") and "problem(s) in the run spec" in lines[0]
    for key in ("data.points:", "data.value:", "data.crs:", "data.x:", "grid.cell:", "simulation.realizations:",
                "simulation.seed:"):
        assert any(line.startswith(f"geosim:   {key}") for line in lines), key
    assert "Traceback" not in result.stderr
    assert result.stderr.rstrip().endswith(geosim.CAUTION)


def test_check_passes_a_valid_spec_and_reads_its_inputs():
    result = invoke("check", AQUIFER)
    assert result.exit_code == 0, result.stderr
    assert "run spec is valid" in result.stdout
    assert "80 in 2-D" in result.stdout and "UTM zone 25S" in result.stdout
    assert "geosim: note: reprojected EPSG:4326 -> EPSG:32725" in result.stderr
    assert geosim.CAUTION in result.stderr


def test_bad_input_file_is_one_line_naming_file_row_and_field(tmp_path):
    rows = (SAMPLES / "alluvial_aquifer" / "wells.csv").read_text().splitlines()
    rows[5] = rows[5].rsplit(",", 1)[0] + ",n/a"
    (tmp_path / "wells.csv").write_text("\n".join(rows) + "\n")
    spec = tmp_path / "run.toml"
    spec.write_text(AQUIFER.read_text().replace('polygon = "domain.geojson"', ""))
    (tmp_path / "planned_wells.csv").write_text((SAMPLES / "alluvial_aquifer" / "planned_wells.csv").read_text())
    result = invoke("check", spec)
    assert result.exit_code == 2
    errors = [line for line in result.stderr.splitlines() if line.startswith("geosim: error:")]
    assert len(errors) == 1
    assert "wells.csv, row 6, field 'k_ms'" in errors[0] and "fix:" in errors[0]


def test_geosim_error_exits_3_with_its_message(extra_commands):
    result = invoke("singular")
    assert result.exit_code == 3
    assert "geosim: error: test system: covariance matrix is not positive definite" in result.stderr
    assert "DH7#2" in result.stderr and "Traceback" not in result.stderr
    assert geosim.CAUTION in result.stderr


def test_internal_error_exits_4_with_a_hint_and_traceback_only_with_debug(extra_commands):
    plain = invoke("explode")
    assert plain.exit_code == 4
    assert "geosim: internal error: RuntimeError: a bug deep inside" in plain.stderr
    assert "rerun with --debug" in plain.stderr and "Traceback" not in plain.stderr
    debug = invoke("--debug", "explode")
    assert debug.exit_code == 4
    assert "Traceback (most recent call last)" in debug.stderr and "rerun with --debug" not in debug.stderr


def test_a_command_that_fails_to_load_is_reported_not_fatal(extra_commands):
    listing = invoke("--help")
    assert listing.exit_code == 0 and "vanished" in listing.stdout and "check" in listing.stdout
    result = invoke("vanished")
    assert result.exit_code == 2
    assert "could not be loaded from geosim_test_commands_missing:command" in result.stderr


def test_main_returns_exit_codes(tmp_path, capsys):
    assert main(["--version"]) == 0
    spec = tmp_path / "bad.toml"
    spec.write_text("not toml at all [")
    assert main(["check", str(spec)]) == 2
    assert main(["no-such-command"]) == 2
    assert "not valid TOML" in capsys.readouterr().err


class FakeClock:
    def __init__(self):
        self.now = 100.0

    def __call__(self):
        return self.now


def test_progress_plain_lines_only_for_long_work(monkeypatch):
    clock = FakeClock()
    monkeypatch.setattr(progress_module.time, "monotonic", clock)
    out = io.StringIO()
    report = ProgressReporter(out, interactive=False)
    for i in range(1, 4):
        report(i, 3, "kriging nodes")  # all at once: quick, stays silent
    for i in range(1, 6):
        clock.now += 2.0
        report(i, 5, "realizations")
    assert out.getvalue() == "realizations: 5 done (8.0 s)\n"


def test_progress_bar_on_a_terminal(monkeypatch):
    clock = FakeClock()
    monkeypatch.setattr(progress_module.time, "monotonic", clock)
    out = io.StringIO()
    report = ProgressReporter(out, interactive=True, width=10)
    report(0, 4, "realizations")
    clock.now += 1.0
    report(2, 4, "realizations")
    clock.now += 1.0
    report(4, 4, "realizations")
    text = out.getvalue()
    assert "\r" in text and "[#####.....] 2/4" in text and "eta 0:01" in text
    assert text.endswith("[##########] 4/4 0:02\x1b[K\n")


def test_progress_quiet_prints_nothing():
    out = io.StringIO()
    report = ProgressReporter(out, quiet=True, interactive=True)
    report(1, 1, "realizations")
    report.note("hello")
    assert out.getvalue() == ""


def test_files_line_names_a_store_once_and_counts_geotiffs_per_folder(tmp_path):
    # a store holds every realization: it is listed once by its path, not counted as one
    # file per realization; GeoTIFF realizations are counted per folder (common practice, no source)
    from geosim_cli.report import files_text
    store = tmp_path / "realizations" / "store.zarr"
    store.mkdir(parents=True)
    tifs = [tmp_path / "blocks" / f"r{i:04d}.tif" for i in range(3)]
    tifs[0].parent.mkdir()
    for t in tifs:
        t.write_bytes(b"")
    text = files_text({"summary": [str(tmp_path / "summary.nc")],
                       "realization_files": [str(store)] * 4 + [str(t) for t in tifs]}, tmp_path)
    assert text == "summary.nc, realizations/store.zarr (store), blocks/ (3 files)"
