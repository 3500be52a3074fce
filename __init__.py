"""ctmtab: exact coding-theorem (algorithmic probability) tables from every
small Turing machine, the files that carry them, and the estimators that use them."""
from ._version import __version__
from .errors import CtmtabError

__all__ = ["__version__", "CtmtabError"]
