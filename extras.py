"""The optional dependencies and the pip extras that bring them (pyproject.toml). Reading
tables, lookups, BDM and verify need none of them: numpy, msgpack and zstandard only."""
from __future__ import annotations

import importlib
import importlib.util

from .errors import ExtraMissingError

# module imported -> (package to name, extra that installs it, what it is needed for)
EXTRAS = {
    "matplotlib": ("matplotlib", "plot", "figures"),
    "scipy.stats": ("scipy", "stats", "rank correlations"),
    "distributed": ("dask.distributed", "cluster", "--scheduler"),
}


def pip_command(extras) -> str:
    return f'python3 -m pip install "ctmtab[{",".join(extras)}]"'


def require(*modules: str, load: bool = True) -> None:
    """Import each module, or raise one ExtraMissingError naming every one missing, what it is
    needed for and the pip command that installs them all. load=False only looks for the
    installed packages, without importing them (matplotlib and scipy.stats take a second or two):
    for a command's check before any work; the use site imports, and words a broken install."""
    absent, broken, missing = [], [], []
    for module in modules:
        try:
            if load:
                importlib.import_module(module)
            elif importlib.util.find_spec(module.partition(".")[0]) is None:
                raise ImportError(name=module)
        except ImportError as exc:
            package = EXTRAS[module][0]
            missing.append(module)
            # installed, but a dependency of its own is missing: say which (pip brings it)
            if exc.name and exc.name.partition(".")[0] not in (module.partition(".")[0], package):
                broken.append(f"{package} does not import ({exc})")
            else:
                absent.append(package)
    if not missing:
        return
    state = [f"{' and '.join(absent)} {'is' if len(absent) == 1 else 'are'} not installed"] if absent else []
    needed = " and ".join(EXTRAS[m][2] for m in missing)
    extras = sorted({EXTRAS[m][1] for m in missing})
    raise ExtraMissingError(f"{'; '.join(state + broken)} (needed for {needed}); install with "
                            f"{pip_command(extras)}")
