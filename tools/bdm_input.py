"""The inputs of `ctmtab bdm`: 1D sequences one per line, 2D a CSV matrix or a .npy array, read
into symbol arrays with one-line errors that name the line and column."""
from __future__ import annotations

import sys
from pathlib import Path

from ..errors import CtmtabError
from .terminal import one_line


def _read_text(path: str) -> str:
    try:
        raw = sys.stdin.buffer.read() if path == "-" else Path(path).read_bytes()
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise CtmtabError(f"{'standard input' if path == '-' else path} is not UTF-8 text (byte {exc.start + 1}); "
                          "give text, one input per line") from None


def _text_cells(line: str, n: int, m: int, alphabet):
    """One line of symbols (digits, dotted cells over 10 symbols, or alphabet characters)."""
    from ..tables import keys as keytext
    from .bdm import symbols_from_text

    if alphabet is not None:
        return symbols_from_text(line, alphabet, f"line {n}")
    col = next((i for i, c in enumerate(line) if c.isalpha()), None)
    if col is not None:
        raise CtmtabError(f"line {n} holds the letter {line[col]!r} at column {col + 1}; give --alphabet (e.g. "
                          f"--alphabet ACGT) to read letters as the symbols 0..{m - 1}")
    cells = keytext.parse(line, m, f"line {n}")
    if cells.ndim != 1:
        raise CtmtabError(f"line {n} holds '/': give one sequence per line")
    return keytext.as_symbols(cells, m, f"line {n}", "", "fix the line")


def _bulk_rows(lines: list, m: int, alphabet) -> dict:
    """{line index: symbols} of the 1D lines that read in bulk, one numpy pass per line length:
    ASCII digits below m (m <= 10), or the characters of an ASCII alphabet. Any other line is
    left to _text_cells, which words its refusal."""
    import numpy as np

    lut = np.full(256, 255, dtype=np.uint8)
    if alphabet is not None and alphabet.isascii():
        lut[np.frombuffer(alphabet.encode(), dtype=np.uint8)] = np.arange(len(alphabet), dtype=np.uint8)
    elif alphabet is None and m <= 10:
        lut[ord("0"):ord("0") + m] = np.arange(m, dtype=np.uint8)
    else:
        return {}
    by_length: dict = {}
    for i, line in enumerate(lines):
        if line.isascii():
            by_length.setdefault(len(line), []).append(i)
    out = {}
    for length, idx in by_length.items():
        rows = lut[np.frombuffer("".join(lines[i] for i in idx).encode(), dtype=np.uint8)].reshape(len(idx), length)
        good = (rows != 255).all(axis=1)
        out.update((i, row) for i, row, ok in zip(idx, rows, good) if ok)
    return out


def read_inputs(source: str, t, alphabet: str | None) -> list:
    """The inputs of `ctmtab bdm` from a file or stdin ("-"): [(label, symbols)], 1D rows or 2D
    arrays; alphabet: the characters of the symbols 0..m-1, or None for digits."""
    import numpy as np

    from ..tables import keys as keytext
    from .bdm import check_alphabet, symbols_from_text

    m, dims = t.space.symbols, t.space.dims
    alphabet = None if alphabet is None else check_alphabet(alphabet, m)
    if source != "-" and source.endswith(".npy"):
        if alphabet is not None:
            raise CtmtabError("--alphabet reads text; a .npy array holds symbols 0..m-1 already, so leave it out")
        try:
            arr = np.load(source, allow_pickle=False)
        except (ValueError, EOFError) as exc:
            raise CtmtabError(f"{source} is not a numpy array file ({one_line(exc)})") from None
        if not isinstance(arr, np.ndarray) or arr.ndim not in (dims, dims + 1) or arr.size == 0:
            raise CtmtabError(f"{source} holds an array of shape {getattr(arr, 'shape', '?')}; give a non-empty "
                              f"{dims}D array (or a stack of them, {dims + 1}D)")
        arr = keytext.as_symbols(arr, m, source, f" of this {t.space.label} table")
        return [(str(i + 1), x) for i, x in enumerate(arr if arr.ndim == dims + 1 else arr[None])]
    lines = [line.rstrip("\r") for line in _read_text(source).split("\n")]
    while lines and not lines[-1].strip():
        lines.pop()  # the final line break, and blank lines after the data
    if not lines:
        raise CtmtabError(f"{'standard input' if source == '-' else source} holds no data")
    for n, line in enumerate(lines, 1):
        if not line.strip():
            raise CtmtabError(f"line {n} is empty; give one input per line")
    if dims == 1:
        fast = _bulk_rows([line.strip() for line in lines], m, alphabet)
        return [(str(n), fast[n - 1] if n - 1 in fast else _text_cells(line.strip(), n, m, alphabet))
                for n, line in enumerate(lines, 1)]
    rows = []
    for n, line in enumerate(lines, 1):
        if "," not in line:
            rows.append(_text_cells(line.strip(), n, m, alphabet))
            continue
        cells = [c.strip() for c in line.split(",")]
        for col, c in enumerate(cells, 1):
            if alphabet is None and not (c.isascii() and c.isdigit()):
                hint = "; give --alphabet to read letters" if c.isalpha() else ""
                raise CtmtabError(f"line {n}, column {col}: {one_line(c)!r} is not a symbol 0..{m - 1}{hint}")
            if alphabet is not None and len(c) != 1:
                raise CtmtabError(f"line {n}, column {col}: {one_line(c)!r} is not one character of the alphabet")
        row = (symbols_from_text("".join(cells), alphabet, f"line {n}") if alphabet is not None
               else np.array([int(c) for c in cells]))
        rows.append(keytext.as_symbols(row, m, f"line {n}", "", "fix the line"))
    if len({len(r) for r in rows}) > 1:
        n = next(i for i, r in enumerate(rows, 1) if len(r) != len(rows[0]))
        raise CtmtabError(f"line {n} has {len(rows[n - 1])} cells, line 1 has {len(rows[0])}; give a "
                          "rectangular matrix")
    return [("1", np.stack(rows))]

