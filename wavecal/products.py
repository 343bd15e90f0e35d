"""Writing a calibration's products: solution JSON and line table CSV.

The figures (the residual plot among them) are drawn by :mod:`wavecal.report`, a later stage.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ._atomic import atomic_write_text
from ._stems import file_stem
from .solution import Solution

__all__ = ["Products", "write_products"]


@dataclass(frozen=True)
class Products:
    """Paths of the files written for one frame."""

    solution: Path
    lines: Path


def write_products(solution: Solution, out_dir: str | Path, *, stem: str | None = None
                   ) -> Products:
    """Write the solution (JSON) and its line table (CSV).

    Every file is written atomically; the output folder is created if needed.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    stem = file_stem(stem or solution.frame or "frame")
    sol_path = solution.write(out_dir / f"{stem}.solution.json")
    lines_path = out_dir / f"{stem}.lines.csv"
    atomic_write_text(lines_path, solution.lines.to_csv(index=False, float_format="%.6f"))
    return Products(sol_path, lines_path)
