"""Names that become file or folder names must work on every probe-station PC.

Windows refuses the device names CON, PRN, AUX, NUL, COM1..COM9 and LPT1..LPT9
as a file or folder name, in any letter case and with any extension
("nul.s2p" is the device too), and drops a trailing dot or space from a name.
(Microsoft, "Naming Files, Paths, and Namespaces", learn.microsoft.com; from memory.)
Common file systems cap one name at 255 bytes; probelog adds its own prefixes
and suffixes (a UTC time, ``-bundle``, ``-raw.s2p``), so ids stay far below.
"""

from __future__ import annotations

import re

_DEVICE = re.compile(r"^(con|prn|aux|nul|com[1-9]|lpt[1-9])(\..*)?$", re.IGNORECASE)

# Longest wafer id kept whole in a session folder name (``YYYYMMDD-HHMMSS-<id>``).
MAX_ID_CHARS = 100


def name_problem(name: str, max_chars: int = MAX_ID_CHARS) -> str | None:
    """Why ``name`` cannot be a portable file or folder name, or None if it can."""
    if len(name) > max_chars:
        return f"{len(name)} characters, longer than the {max_chars} a file name can carry here"
    if name != name.rstrip(". "):
        return "ends in a dot or a space, which Windows drops from file names"
    m = _DEVICE.match(name)
    if m:
        return f"{m.group(1).upper()} is a device name on Windows and cannot be a file or folder name"
    return None
