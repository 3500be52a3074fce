"""The compiled core, imported at its first use, so that reading, verifying and
looking up tables needs no compiler (issue 12)."""
from __future__ import annotations

from ..errors import CoreMissingError

API_VERSION = 10  # the compiled module must match this Python code (csrc/ctm_core.h CTM_API_VERSION)

_module = None


def load():
    """ctmtab.enumerator._core, checked once; CoreMissingError says how to get it."""
    global _module
    if _module is None:
        try:
            from . import _core as mod
        except ImportError as exc:
            raise CoreMissingError(
                f"the compiled core is missing ({exc}); reading, looking up and verifying tables work "
                "without it, building and running machines do not: install from the source folder with "
                "a C compiler, python3 -m pip install .") from None
        if getattr(mod, "API_VERSION", None) != API_VERSION:
            raise CoreMissingError(
                f"ctmtab's compiled core has API version {getattr(mod, 'API_VERSION', None)}, expected "
                f"{API_VERSION}; rebuild it with python3 -m pip install .")
        _module = mod
    return _module


class _Core:
    """Stands in for the _core module: the first attribute used imports it."""

    __slots__ = ()

    def __getattr__(self, name):
        return getattr(load(), name)


core = _Core()
