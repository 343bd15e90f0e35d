"""Solve and write: calibrate one arc frame and write what it gives, the one way every caller
does it (``wavecal solve``, ``wavecal demo`` and a night's arc task).

The files, all written atomically into one folder, with the stem of the frame:

- ``<stem>.solution.json``: the solution (always);
- ``<stem>.lines.csv``: its line table (``line_table``), and ``<stem>.residuals.png`` (``plot``);
- ``<stem>.spectrum.npz``: the extracted arc spectrum kept beside the solution (``spectrum``);
- the QA report of the frame (``report``: HTML with figures, and its JSON twin).
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ._atomic import atomic_write_bytes
from .calibrate import calibrate_frame
from .frames import Frame
from .products import write_products
from .profile import InstrumentProfile
from .report.spectrum_file import save_spectrum, spectrum_path
from .solution import Solution

__all__ = ["Written", "solve_and_write"]


@dataclass(frozen=True)
class Written:
    """A solved frame and the paths of the files written for it (None: not written)."""

    solution: Solution
    solution_path: Path
    lines: Path | None
    residual_plot: Path | None
    spectrum: Path | None
    report: Path | None


def solve_and_write(frame: Frame, profile: InstrumentProfile, out_dir: str | Path, *, stem: str,
                    line_table: bool = True, plot: bool = False, spectrum: bool = True,
                    report: bool = False, **options: Any) -> Written:
    """Calibrate ``frame`` and write its solution and the products asked for into ``out_dir``.

    Parameters
    ----------
    frame : Frame
        The arc frame, already read (and checked by the caller).
    profile : InstrumentProfile
        The instrument.
    out_dir : str or Path
        Output folder (created if needed).
    stem : str
        File stem. With ``line_table`` it is made safe (:func:`~wavecal._stems.file_stem`:
        the frame's file name will do); without, it is used as given.
    line_table : bool
        Also write the line table (CSV).
    plot : bool
        With ``line_table``: also draw the residual plot (the report draws its own).
    spectrum : bool
        Keep the extracted arc spectrum beside the solution file.
    report : bool
        Write the frame's QA report.
    **options
        Keyword arguments of :func:`~wavecal.calibrate.calibrate_frame` (``lamps``, ``rows``,
        ``min_snr``, ...).

    Returns
    -------
    Written
    """
    out_dir = Path(out_dir)
    calibration = calibrate_frame(frame, profile, details=True, **options)
    solution = calibration.solution
    lines = residual_plot = spectrum_file = report_file = None
    if line_table:
        products = write_products(solution, out_dir, stem=stem)
        solution_path, lines = products.solution, products.lines
        if plot:
            from .report.figures import residuals_figure  # drawing: only when asked for

            residual_plot = solution_path.with_name(
                solution_path.name.removesuffix(".solution.json") + ".residuals.png")
            atomic_write_bytes(residual_plot, residuals_figure(solution).png())
    else:
        out_dir.mkdir(parents=True, exist_ok=True)
        solution_path = solution.write(out_dir / f"{stem}.solution.json")
    if spectrum:
        spectrum_file = save_spectrum(spectrum_path(solution_path), calibration.spectrum.x,
                                      calibration.spectrum.flux)
    if report:
        from .report.frame_report import write_frame_report  # figures: only when drawn

        report_file = write_frame_report(
            solution, out_dir, spectrum=calibration.spectrum,
            stem=solution_path.name.removesuffix(".solution.json")).html
    return Written(solution, solution_path, lines, residual_plot, spectrum_file, report_file)
