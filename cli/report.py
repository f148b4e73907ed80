"""Summary tables printed at the end of geosim commands."""
from __future__ import annotations

import math
from pathlib import Path


def seconds(value: float) -> str:
    return f"{value:.1f} s" if value < 120 else f"{value / 60:.1f} min"


def number(value) -> str:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "n/a"
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def crossval_text(summary: dict) -> str:
    """Cross-validation figures, in data units first (what a geologist reads), then normal scores.

    ``summary`` is the pipeline's ``{"normal_scores": {...}, "data_units": {...}}``.
    """
    lines = []
    data = summary.get("data_units")
    if data:
        units = f" ({data['units']})" if data.get("units") else ""
        line = (f"data units{units}: RMSE {number(data.get('rmse'))}, mean error "
                f"{number(data.get('mean_error'))}")
        if "declustered_rmse" in data:
            line += (f"; declustered RMSE {number(data['declustered_rmse'])}, mean error "
                     f"{number(data['declustered_mean_error'])}")
        lines.append(line + "; estimate = back-transformed conditional mean")
    scores = summary.get("normal_scores", summary)
    lines.append(f"normal scores: RMSE {number(scores.get('rmse'))}, mean error "
                 f"{number(scores.get('mean_error'))}, mean standardized squared error "
                 f"{number(scores.get('mean_standardized_squared_error'))} "
                 f"({scores.get('estimated', '?')} of {scores.get('samples', '?')} samples estimated, "
                 f"{scores.get('below_min_samples', '?')} with fewer than the minimum in their search)")
    return "\n".join(lines)


def decision_text(rows: list[dict], limit: int = 6, units: str = "", metal_unit: str = "") -> str:
    from geosim.summaries import figure_display
    lines = []
    for row in rows[:limit]:
        level_key = next(iter(row))
        (p10, p50, p90), unit = figure_display(row["figure"], [row.get("P10", math.nan), row.get("P50", math.nan),
                                                               row.get("P90", math.nan)], units, metal_unit)
        level = f"{row[level_key]:g}" + (f" {units}" if units else "")
        lines.append(f"{row['figure'].replace('_', ' ')} at {level_key} {level}: P10 {number(float(p10))}, "
                     f"P50 {number(float(p50))}, P90 {number(float(p90))}" + (f" {unit}" if unit else ""))
    if len(rows) > limit:
        lines.append(f"... {len(rows) - limit} more in decision_spread.csv")
    return "\n".join(lines)


def _relative(path: str | Path, out_dir: Path) -> str:
    try:
        return str(Path(path).resolve().relative_to(Path(out_dir).resolve()))
    except ValueError:
        return str(path)


def files_text(files: dict[str, list[str]], out_dir: Path, limit: int = 8) -> str:
    """The written files, realizations summed up: a store by its path, GeoTIFFs by folder and count."""
    shown = []
    for kind, paths in files.items():
        if kind == "realization_files":
            stores, counts = [], {}
            for p in dict.fromkeys(paths):  # one entry per store, not one per realization in it
                if Path(p).is_dir():
                    stores.append(_relative(p, out_dir))
                else:
                    folder = _relative(Path(p).parent, out_dir)
                    counts[folder] = counts.get(folder, 0) + 1
            shown += [f"{s} (store)" for s in stores]
            shown += [f"{folder}/ ({n} file{'s' if n > 1 else ''})" for folder, n in counts.items()]
            continue
        shown += [_relative(p, out_dir) for p in paths]
    if len(shown) > limit:
        shown = shown[:limit] + [f"... {len(shown) - limit} more"]
    return ", ".join(shown)
