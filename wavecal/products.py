"""Writing a calibration's products: solution JSON, line table CSV and residual plot."""
from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

from ._atomic import atomic_write_bytes, atomic_write_text
from .solution import Solution

__all__ = ["Products", "write_products", "safe_stem"]


@dataclass(frozen=True)
class Products:
    """Paths of the files written for one frame."""

    solution: Path
    lines: Path
    residual_plot: Path | None


def safe_stem(name: str) -> str:
    """A file-name stem made only of safe characters (no path separators, no leading dots)."""
    stem = Path(str(name)).name
    for suffix in (".gz", ".fz", ".fits", ".fit", ".fts"):
        if stem.lower().endswith(suffix):
            stem = stem[: -len(suffix)]
    stem = re.sub(r"[^A-Za-z0-9._+-]", "_", stem).lstrip(".")
    return stem or "frame"


def write_products(solution: Solution, out_dir: str | Path, *, stem: str | None = None,
                   plot: bool = True) -> Products:
    """Write the solution (JSON), its line table (CSV) and a residual plot (PNG).

    Every file is written atomically; the output folder is created if needed.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    stem = safe_stem(stem or solution.frame or "frame")
    sol_path = solution.write(out_dir / f"{stem}.solution.json")
    lines_path = out_dir / f"{stem}.lines.csv"
    atomic_write_text(lines_path, solution.lines.to_csv(index=False, float_format="%.6f"))
    plot_path = None
    if plot:
        from .report.figures import residuals_figure

        plot_path = out_dir / f"{stem}.residuals.png"
        atomic_write_bytes(plot_path, residuals_figure(solution).png())
    return Products(sol_path, lines_path, plot_path)
