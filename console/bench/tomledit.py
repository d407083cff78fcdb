"""Change a few values in a TOML profile's text, keeping its comments and layout (for corrected copies).

tomllib only reads; a corrected profile must stay the user's file with their comments, so the edit is line-based:
`key = value` inside `[section]` is replaced in place (its trailing comment kept) or added after the section header.
The result is parsed again with tomllib to make sure it is still valid TOML with the intended values.
"""

from __future__ import annotations

import math
import re
import tomllib
from collections.abc import Mapping

_HEADER = re.compile(r"^\s*\[([^\[\]]+)\]\s*(#.*)?$")
_KEY = re.compile(r"^(\s*)([A-Za-z0-9_-]+)(\s*=\s*)([^#]*?)(\s*#.*)?$")


def toml_value(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"not a TOML number: {value}")
        return repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    raise TypeError(f"cannot write {type(value).__name__} to TOML")


def edit_toml(text: str, changes: Mapping[tuple[str, str], object]) -> str:
    """Set (section, key) -> value in TOML text; sections must exist or are appended at the end."""
    lines = text.splitlines()
    pending = dict(changes)
    section: str | None = None
    header_line: dict[str, int] = {}
    for i, line in enumerate(lines):
        header = _HEADER.match(line)
        if header:
            section = header.group(1).strip()
            header_line[section] = i
            continue
        match = _KEY.match(line)
        if match and section is not None and (section, match.group(2)) in pending:
            value = pending.pop((section, match.group(2)))
            lines[i] = f"{match.group(1)}{match.group(2)}{match.group(3)}{toml_value(value)}{match.group(5) or ''}"
    inserts: dict[int, list[str]] = {}
    for (sec, key), value in pending.items():
        if sec in header_line:
            inserts.setdefault(header_line[sec], []).append(f"{key} = {toml_value(value)}")
        else:
            lines += ["", f"[{sec}]"]
            header_line[sec] = len(lines) - 1
            lines.append(f"{key} = {toml_value(value)}")
    for index in sorted(inserts, reverse=True):
        lines[index + 1:index + 1] = inserts[index]
    result = "\n".join(lines) + "\n"
    data = tomllib.loads(result)
    for (sec, key), value in changes.items():
        table = data
        for part in sec.split("."):
            table = table[part]
        if table[key] != value:
            raise ValueError(f"editing [{sec}] {key} did not take")
    return result
