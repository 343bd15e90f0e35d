"""QA reports of solutions and nights: self-contained HTML pages, PNG figures and JSON twins.

:func:`write_frame_report` writes the report of one solution, :func:`write_night_report` the
page of a night's output folder (and the reports of its arcs).
"""
from .frame_report import FrameReport, frame_facts, write_frame_report
from .night_report import NightReport, write_night_report
from .spectrum_file import load_spectrum, save_spectrum, spectrum_path

__all__ = ["FrameReport", "frame_facts", "write_frame_report", "NightReport",
           "write_night_report", "load_spectrum", "save_spectrum", "spectrum_path"]
