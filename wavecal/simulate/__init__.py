"""Synthetic arc-lamp frames with a known pixel-to-wavelength truth.

:func:`simulate_arc` renders the raw frame a detector would read from a true physical model of
the spectrograph; :class:`SimulatedArc` holds the frame and its truth. The modules, in the order
the light takes: :mod:`.models` (nominal and true grating models), :mod:`.lamp` and
:mod:`.hydrogen` (the lines on the detector), :mod:`.line_profile` and :mod:`.line_shape` or
:mod:`.camera` (where and how wide each line lies on every row), :mod:`.render` (expected
electrons), :mod:`.detector` (layout, bias, noise, saturation, header) and :mod:`.core`.
"""
from .arc import SimulatedArc
from .core import simulate_arc
from .line_profile import slit_line_profile
from .line_shape import LineImageShape

__all__ = ["LineImageShape", "SimulatedArc", "simulate_arc", "slit_line_profile"]
