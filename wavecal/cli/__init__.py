"""The ``wavecal`` command: argparse code only (parse, call one function, return an exit code).

:mod:`~wavecal.cli.main` holds the entry point and the parser; each subcommand with options of
its own has a module here that adds them and runs it (``add_*_arguments`` / ``run_*_command``):
:mod:`~wavecal.cli.solve` (``solve`` and ``demo``), :mod:`~wavecal.cli.apply`,
:mod:`~wavecal.cli.night`, :mod:`~wavecal.cli.plan` and :mod:`~wavecal.cli.report`. The exit
codes are :class:`wavecal.status.ExitCode`.
"""

__all__: list[str] = []
