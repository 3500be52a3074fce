"""The exhaustive enumerator: the C core, its binding and the Python driver.

Names load on first use (PEP 562) and the compiled core only when a search runs
(native.py). Space and Tally live in model/ (tables/ reads them without the enumerator) and are
named here too, beside build, for the callers of old."""
import importlib

_HOME = {
    "ALL_DECIDERS": ".driver", "DECIDERS": ".driver", "Estimate": ".driver", "Target": ".driver",
    "build": ".driver", "estimate": ".driver", "plan": ".driver", "run_unit": ".driver", "sample": ".driver",
    "Plan": ".units", "Unit": ".units", "Machine": ".machine", "Run": ".machine", "run": ".machine",
    "Space": "..model.space", "Tally": "..model.tally",
}

__all__ = sorted(_HOME)


def __getattr__(name):
    if name not in _HOME:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(_HOME[name], __name__), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_HOME))
