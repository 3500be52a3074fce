"""Key text, the one spelling of a key wherever one is written or read, and the check that
turns data into symbols.

Up to 10 symbols a cell is one digit (0110); rows of a 2D key run north to south, joined by
"/" (01/10). Over 10 symbols the cells of a row are joined by "." (3.11.0), and a row of one
cell of two or more digits ends with a dot (10.), so every written key reads back as itself: a
written row is either dotted or a single digit. Typed input with an undotted row of two or more
digits is refused over 10 symbols: "10" could be the cells 1, 0 or the one cell 10."""
from __future__ import annotations

import numpy as np

from ..errors import TableError

class OutsideAlphabetError(TableError):
    """Key text whose cell is too long to be a symbol of the alphabet."""


SHOWN = 40  # characters of a key quoted in an error: keys run to thousands of cells

# what a dtype holds, for a one-line refusal
_KINDS = {"f": "fractional (float)", "c": "complex", "O": "Python object", "U": "text", "S": "bytes",
          "M": "date", "m": "time-interval", "V": "raw record"}


def shown(text) -> str:
    text = str(text)
    return repr(text if len(text) <= SHOWN else text[:SHOWN] + "...")


def write(m: int, shape: tuple, row) -> str:
    """The key text of one key: `row` holds its cells row-major, `shape` is (L,) or (R, C)."""
    row = np.frombuffer(bytes(row), dtype=np.uint8) if isinstance(row, (bytes, bytearray)) else np.asarray(row)
    width = shape[-1]
    if m <= 10:
        text = (row.astype(np.uint8) + 48).tobytes().decode("ascii")
        return "/".join(text[i: i + width] for i in range(0, len(text), width))
    cells = [str(int(s)) for s in row]
    rows = (cells[i: i + width] for i in range(0, len(cells), width))
    return "/".join(".".join(r) + ("." if len(r) == 1 and len(r[0]) > 1 else "") for r in rows)


def parse(text: str, m: int | None, what: str = "key") -> np.ndarray:
    """Key text -> int64 cells: a 1D array for one row, rows x cols for several. m: the table's
    symbols (None reads any written key, an undotted row as one digit a cell). Refuses empty
    rows or cells, rows of unequal length, anything but ASCII digits and dots, cells with
    leading zeros, and over 10 symbols an undotted row of two or more digits (ambiguous). The
    range 0..m-1 is left to the caller's as_symbols, except for cells too long to be one."""
    if not text:
        raise TableError(f"{what} '' is empty; give at least one symbol")
    rows = text.split("/")
    widest = len(str(m - 1)) if m else 3  # symbols are stored in one byte
    out = [_row(f"{what} {shown(text)}", r, m, widest, len(rows) > 1) for r in rows]
    if len(out) == 1:
        return out[0]
    if len({len(r) for r in out}) != 1:
        raise TableError(f"{what} {shown(text)}: its rows differ in length; give rows of equal length")
    return np.stack(out)


def _row(name: str, row: str, m: int | None, widest: int, several: bool) -> np.ndarray:
    where = f" in its row {shown(row)}" if several else ""
    if not row:
        raise TableError(f"{name} has an empty row; give at least one symbol per row")
    if "." not in row:
        if not (row.isascii() and row.isdigit()):
            raise TableError(f"{name} holds {_first_bad(row)!r}{where}, which is not a symbol; "
                             + _how(m))
        if m is not None and m > 10 and len(row) > 1:
            raise TableError(f"{name} is ambiguous over {m} symbols{where}: " + _readings(row, m))
        return np.frombuffer(row.encode("ascii"), dtype=np.uint8).astype(np.int64) - 48
    parts = row.split(".")
    if parts[-1] == "":
        parts.pop()  # the one trailing dot that marks a dotted row
    for p in parts:
        if not p:
            raise TableError(f"{name} has an empty cell{where} (two dots, or a dot first or "
                             "last but one); " + _how(m))
        if not (p.isascii() and p.isdigit()) or (len(p) > 1 and p[0] == "0"):
            raise TableError(f"{name} holds the cell {shown(p)}{where}, which is not a symbol; write "
                             "each symbol as plain digits, without leading zeros, signs or spaces")
        if len(p) > widest:
            top = f"0..{m - 1}" if m else "0..255"
            raise OutsideAlphabetError(f"{name} holds symbols outside {top} (the symbol {shown(p)}); fix it")
    return np.array([int(p) for p in parts], dtype=np.int64)


def _first_bad(row: str) -> str:
    return next(c for c in row if not ("0" <= c <= "9"))


def _how(m: int | None) -> str:
    if m is not None and m <= 10:
        return f"write symbols 0..{m - 1} as digits (e.g. 0110), rows joined by '/'"
    top = f"0..{m - 1}" if m else "as digits"
    return (f"write symbols {top} with a dot between cells (e.g. 3.11.0, or 10. for the one cell 10), "
            "rows joined by '/'")


def _readings(row: str, m: int) -> str:
    cells = ", ".join(row) if len(row) <= 8 else ", ".join(row[:8]) + ", ..."
    split = ".".join(row) if len(row) <= 8 else ".".join(row[:8]) + "..."
    one = row[0] != "0" and int(row) < m if len(row) <= 3 else False
    if one:
        return f"write {split} for the cells {cells}, or {row}. for the one cell {row}"
    return f"write its cells apart with dots, e.g. {split} for the cells {cells}"


def data_array(x, m: int | None, what: str = "the data") -> np.ndarray:
    """Data as an array, not yet checked: key text parsed, anything else through numpy, ragged
    rows refused in one line."""
    if isinstance(x, str):
        return parse(x, m, what)
    try:
        return np.asarray(x)
    except (ValueError, TypeError):
        raise TableError(f"{what} has rows of unequal length or mixed types; give an array of integer "
                         "symbols") from None


def as_symbols(arr: np.ndarray, m: int, what: str, where: str = "", fix: str = "fix the data") -> np.ndarray:
    """arr as uint8 symbols 0..m-1, or one error naming the problem: only integer (or bool) data
    are symbols. Floats are refused even when whole: 0.9, NaN or 1e20 would otherwise become some
    other symbol. Checks one min and one max, so no symbol can alias another key's code."""
    if arr.dtype == bool:
        return arr.astype(np.uint8)
    if not np.issubdtype(arr.dtype, np.integer):
        kind = _KINDS.get(arr.dtype.kind, str(arr.dtype))
        hint = " (convert whole numbers with .astype(int) once you know they are whole)" if arr.dtype.kind == "f" else ""
        raise TableError(f"{what} holds {kind} values ({arr.dtype}); give integer symbols 0..{m - 1}{hint}")
    if arr.size:
        low, high = int(arr.min()), int(arr.max())
        if low < 0 or high >= m:
            raise TableError(f"{what} holds symbols outside 0..{m - 1}{where} (the symbol "
                             f"{low if low < 0 else high}); {fix}")
    return arr.astype(np.uint8, copy=False)
