"""Table files: the format, the reader estimators consume, verification, merging."""
from .load import load, loads, shipped
from .merge import merge
from .table import MISSING_POLICIES, Table
from .verify import problems

__all__ = ["MISSING_POLICIES", "Table", "load", "loads", "merge", "problems", "shipped"]
