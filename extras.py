"""The optional dependencies and the pip extras that bring them (pyproject.toml). Reading
tables, lookups, BDM and verify need none of them: numpy, msgpack and zstandard only."""
from __future__ import annotations

import importlib

from .errors import ExtraMissingError

# module imported -> (package to name, extra that installs it, what it is needed for)
EXTRAS = {
    "matplotlib": ("matplotlib", "plot", "figures"),
    "scipy.stats": ("scipy", "stats", "rank correlations"),
    "distributed": ("dask.distributed", "cluster", "--scheduler"),
}


def pip_command(extras) -> str:
    return f'python3 -m pip install "ctmtab[{",".join(extras)}]"'


def require(*modules: str) -> None:
    """Import each module, or raise one ExtraMissingError naming every one missing, what it is
    needed for and the pip command that installs them all."""
    absent, broken, missing = [], [], []
    for module in modules:
        try:
            importlib.import_module(module)
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
