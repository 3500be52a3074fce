"""Text from files, made safe to print: the command line's reports and errors show what a file
holds without letting it send escape sequences or forge lines."""
from __future__ import annotations


def printable(text: str) -> str:
    """Text from a file, safe for a terminal: control and format characters (escape sequences,
    bidi overrides) shown as \\x.. / \\u.. escapes, never sent raw."""
    return "".join(c if c.isprintable() or c == "\n" else
                   (f"\\x{ord(c):02x}" if ord(c) < 0x100 else f"\\u{ord(c):04x}" if ord(c) < 0x10000
                    else f"\\U{ord(c):08x}") for c in text)


def one_line(text) -> str:
    """A field from a file as one printable line: a line break in it is shown as \\n, so a file
    cannot forge lines of a report."""
    return printable(str(text)).replace("\n", "\\n")
