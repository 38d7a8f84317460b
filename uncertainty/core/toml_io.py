"""Reading TOML files (study files, prior sets) with errors that name the file, line and key.
"""

from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any

from uncertainty.core.errors import study_error


def read_toml(path: Path, *, file_label: str | None = None) -> dict[str, Any]:
    """Parse a TOML file; syntax errors become StudyError naming the line and its key."""
    label = file_label or str(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise study_error(f"cannot read the file ({exc.strerror})", label, None, None) from None
    return parse_toml_bytes(data, label)


def parse_toml_bytes(data: bytes, label: str) -> dict[str, Any]:
    """Parse TOML bytes; syntax errors (duplicate keys included) become StudyError with the key path."""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise study_error("the file is not UTF-8 text", label, None, None) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        line_no = getattr(exc, "lineno", None)
        if line_no is None:
            import re

            m = re.search(r"at line (\d+)", str(exc))
            line_no = int(m.group(1)) if m else None
        msg = str(exc).split(" (at ")[0]
        key, shown = key_at_line(text, line_no)
        if "overwrite" in msg or "Cannot declare" in msg:
            msg = "duplicate key (" + msg + ")"
        raise study_error(f"TOML syntax error on line {line_no}: {msg}", label, key, shown) from None


def key_at_line(text: str, line_no: int | None) -> tuple[str | None, str | None]:
    """Best-effort dotted key of the line ``line_no`` (1-based) and the line's text."""
    if not line_no:
        return None, None
    lines = text.splitlines()
    if line_no > len(lines):
        return None, None
    line = lines[line_no - 1].strip()
    section = ""
    for prev in reversed(lines[: line_no - 1]):
        s = prev.strip()
        if s.startswith("["):
            section = s.strip("[] ")
            break
    if line.startswith("["):
        return line.strip("[] "), line
    name = line.split("=", 1)[0].strip().strip('"') if "=" in line else line
    return (f"{section}.{name}" if section else name), line
