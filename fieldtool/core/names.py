"""Names that enter the tool: board serials and profile names (which become file and folder
names), and the short tags a profile gives parts and test points (which appear in fault specs,
readings files and on screen).

One rule each, written once, so the message that refuses a name lists exactly what is allowed.
"""

from __future__ import annotations

import unicodedata

FILE_NAME_MAX_BYTES = 200  # well inside every common file system's 255-byte name limit
FILE_NAME_PUNCTUATION = "-_.+#()"
FILE_NAME_ALLOWED = "letters, digits, spaces inside, and - _ . + # ( )"
# Names Windows keeps for devices, in any case and with any extension (Microsoft, "Naming
# Files, Paths, and Namespaces"; from memory): a history copied to such a machine could not
# hold a board called CON or COM1.
RESERVED_DEVICE_NAMES = frozenset(
    {"CON", "PRN", "AUX", "NUL"}
    | {f"COM{i}" for i in range(1, 10)}
    | {f"LPT{i}" for i in range(1, 10)}
)

TAG_MAX_CHARACTERS = 12  # a designator or test-point label fits the ladder view's columns
TAG_PUNCTUATION = "-_.+/#"
TAG_ALLOWED = "letters, digits and - _ . + / #, at most 12 characters"


def file_name_problem(name: str) -> str | None:
    """Why ``name`` cannot be one portable file name, or None when it can."""
    if not name.strip():
        return "is empty"
    if name != name.strip():
        return "has a space at the start or end"
    if "/" in name or "\\" in name:
        return "contains a path separator"
    for char in name:
        if unicodedata.category(char)[0] == "C" or unicodedata.category(char) in ("Zl", "Zp"):
            return "contains a control character"
        if not (char.isalnum() or char == " " or char in FILE_NAME_PUNCTUATION):
            return f"contains {char!r}"
    if name.startswith("."):
        return "starts with a dot"
    if name.endswith("."):
        return "ends with a dot"
    if ".." in name:
        return "contains '..'"
    if name.split(".")[0].upper().rstrip() in RESERVED_DEVICE_NAMES:
        return f"is a name Windows reserves for a device ({name.split('.')[0].upper()})"
    if len(name.encode("utf-8")) > FILE_NAME_MAX_BYTES:
        return f"is longer than {FILE_NAME_MAX_BYTES} bytes"
    return None


def tag_problem(text: str) -> str | None:
    """Why ``text`` cannot be a part designator or test-point label, or None when it can."""
    if not text:
        return "is empty"
    if len(text) > TAG_MAX_CHARACTERS:
        return f"is {len(text)} characters long"
    for char in text:
        if not (char.isalnum() or char in TAG_PUNCTUATION) or not char.isprintable():
            return f"contains {char!r}"
    return None


TECHNICIAN_MAX_CHARACTERS = 60  # a name or initials, as it is signed in the history and report


def technician_problem(name: str) -> str | None:
    """Why ``name`` cannot sign a session (name or initials), or None when it can."""
    if not name.strip():
        return "is empty: give your name or initials"
    if len(name) > TECHNICIAN_MAX_CHARACTERS:
        return f"is {len(name)} characters long (at most {TECHNICIAN_MAX_CHARACTERS})"
    if not name.isprintable():
        return "contains a control character"
    return None
