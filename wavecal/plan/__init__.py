"""The setup planner: what a grating setting will put on the detector, worked out before the night.

:func:`plan_setup` (:mod:`.core`) builds a :class:`SetupPlan`; :mod:`.orders` works out the other
orders and the order-sorting filters, :mod:`.lamps` scores the lamps, :mod:`.text` prints the plan
as a table and :mod:`.plot` draws it (matplotlib, imported only by that module).
"""
from .core import DEFAULT_SENSITIVITY_NM, PlanningError, SamplePoint, SetupPlan, plan_setup
from .orders import FilterAdvice, OrderOverlap, clean_range

__all__ = ["DEFAULT_SENSITIVITY_NM", "PlanningError", "SamplePoint", "OrderOverlap", "FilterAdvice",
           "SetupPlan", "plan_setup", "clean_range"]
