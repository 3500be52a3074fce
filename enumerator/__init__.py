"""The exhaustive enumerator: the C core, its binding and the Python driver."""
from . import _core
from .driver import ALL_DECIDERS, DECIDERS, Estimate, Target, build, estimate, plan, run_unit, sample
from .units import Plan, Unit
from .machine import Machine, Run, run
from .space import Space
from .tally import Tally

if _core.API_VERSION != 1:  # the compiled module must match this Python code
    raise ImportError(
        f"ctmtab's compiled core has API version {_core.API_VERSION}, expected 1; reinstall with pip install ."
    )

__all__ = [
    "ALL_DECIDERS", "DECIDERS", "Estimate", "Machine", "Plan", "Run", "Space", "Tally", "Unit",
    "Target", "build", "estimate", "plan", "run", "run_unit", "sample",
]
