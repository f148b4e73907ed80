"""Areas, volumes and tonnages in the run summary carry their units, scaled to read well."""
from __future__ import annotations

import numpy as np

from geosim.summaries import figure_display
from geosim_cli.report import decision_text


def test_units_switch_where_the_larger_unit_reads_better():
    np.testing.assert_array_equal(figure_display("area", [999_999.0])[0], [999_999.0])
    assert figure_display("area", [999_999.0])[1] == "m\u00b2"
    values, unit = figure_display("area", [1.5e5, 2.0e6, np.nan])
    assert unit == "km\u00b2" and values[1] == 2.0 and values[0] == 0.15 and np.isnan(values[2])
    assert figure_display("volume", [3.0e7])[1] == "million m\u00b3"
    assert figure_display("tonnage", [4.2e6])[1] == "Mt"
    assert figure_display("tonnage", [4.2e5])[1] == "t"
    assert figure_display("mean_grade", [0.7], units="% Cu")[1] == "% Cu"
    assert figure_display("metal", [10.0], metal_unit="t")[1] == "t"


def test_run_summary_lines_carry_units():
    rows = [{"threshold": 1e-4, "figure": "area", "n": 20, "mean": 2.1e6, "P10": 1.5e6, "P50": 2.0e6, "P90": 2.6e6},
            {"threshold": 1e-4, "figure": "fraction_above", "n": 20, "mean": 0.3, "P10": 0.2, "P50": 0.3,
             "P90": 0.4},
            {"cutoff": 0.5, "figure": "volume", "n": 10, "mean": 8e5, "P10": 7e5, "P50": 8e5, "P90": 9e5},
            {"cutoff": 0.5, "figure": "metal", "n": 10, "mean": 8e3, "P10": 7e3, "P50": 8e3, "P90": 9e3}]
    lines = decision_text(rows, units="m/s", metal_unit="t").splitlines()
    assert lines[0] == "area at threshold 0.0001 m/s: P10 1.5, P50 2, P90 2.6 km\u00b2"
    assert lines[1].endswith("P90 0.4 of the domain")
    assert lines[2].endswith("P90 9e+05 m\u00b3") and lines[3].endswith(" t")
