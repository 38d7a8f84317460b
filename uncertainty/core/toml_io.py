"""Reading TOML files (study files, prior sets) with errors that name the file, line and key.

Before parsing, a file is bounded: its size (:data:`uncertainty.core.files.MAX_STUDY_BYTES`), its
number of keys (:data:`MAX_KEYS`) and its nesting depth (:data:`MAX_DEPTH`: brackets, braces and the
parts of a dotted key), so that no document, however built, makes the parser or the validation that
follows run for long or recurse deeply. A UTF-8 byte-order mark is accepted.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path
from typing import Any

from uncertainty.core.errors import study_error
from uncertainty.core.files import MAX_STUDY_BYTES, read_limited

#: Most key assignments and table headers a study or prior set may hold. The bundled studies hold
#: under 200 and the largest prior set under 1,000 (common practice: an absurdity bound).
MAX_KEYS = 10_000

#: Deepest nesting of arrays, inline tables and dotted-key parts. A study nests four levels at most
#: (``[[observations]]`` -> ``columns`` -> ``time`` -> value); 32 leaves room (common practice).
MAX_DEPTH = 32


def read_toml(path: Path, *, file_label: str | None = None) -> dict[str, Any]:
    """Read and parse a TOML file of bounded size, keys and depth.

    Parameters
    ----------
    path : Path
        The file.
    file_label : str, optional
        How messages name it (default ``path``).

    Returns
    -------
    dict
        The parsed document.

    Raises
    ------
    StudyError
        (exit 2) The file cannot be read, is not a regular file, is too large, too deep or holds too many
        keys, or is not valid TOML (naming the line and its key).
    """
    label = file_label or str(path)
    data = read_limited(path, MAX_STUDY_BYTES, what="file", label=label)
    return parse_toml_bytes(data, label)


def check_structure(text: str, label: str) -> None:
    """Refuse a TOML text with more than :data:`MAX_KEYS` keys or nesting deeper than :data:`MAX_DEPTH`.

    A scan of the characters outside strings and comments, linear in the length of the text; it runs
    before the parser so that pathological documents are refused at once.

    Parameters
    ----------
    text : str
        The TOML text.
    label : str
        The file, for messages.

    Raises
    ------
    StudyError
        Naming the line where the bound is passed.
    """
    depth = 0
    keys = 0
    line = 1
    dots = 0  # dotted-key parts on the current line before its "="
    before_eq = True
    i, n = 0, len(text)
    while i < n:
        c = text[i]
        if c == "\n":
            line += 1
            dots, before_eq = 0, True
            i += 1
            continue
        if c == "#":
            j = text.find("\n", i)
            i = n if j < 0 else j
            continue
        if c in "\"'":
            triple = text.startswith(c * 3, i)
            quote = c * 3 if triple else c
            j = i + len(quote)
            while j < n:
                if c == '"' and text[j] == "\\":
                    j += 2
                    continue
                if text.startswith(quote, j):
                    break
                if text[j] == "\n":
                    if not triple:
                        break
                    line += 1
                j += 1
            i = j + len(quote)
            continue
        if c in "[{":
            depth += 1
            if depth > MAX_DEPTH:
                raise study_error(f"nested more than {MAX_DEPTH} levels deep (line {line}); a study nests a "
                                  "few levels", label, None, None)
        elif c in "]}":
            depth = max(depth - 1, 0)
        elif c == "." and before_eq:
            dots += 1
            if dots + depth > MAX_DEPTH:
                raise study_error(f"a dotted key with more than {MAX_DEPTH} parts (line {line})", label, None,
                                  None)
        elif c == "=" and before_eq:
            before_eq = False
            keys += 1
            if keys > MAX_KEYS:
                raise study_error(f"more than {MAX_KEYS:,} keys (line {line}); a study holds a few hundred at "
                                  "most", label, None, None)
        elif c == ",":
            before_eq = True  # the next key of an inline table
            dots = 0
        i += 1


def parse_toml_bytes(data: bytes, label: str) -> dict[str, Any]:
    """Parse TOML bytes; syntax errors (duplicate keys included) become StudyError with the key path.

    Parameters
    ----------
    data : bytes
        The file's content (UTF-8, a byte-order mark allowed).
    label : str
        The file, for messages.

    Returns
    -------
    dict
        The parsed document.

    Raises
    ------
    StudyError
        Not UTF-8, too large, too deep or too many keys (:func:`check_structure`), or a TOML syntax error
        naming its line (the last line for a file that ends too early) and the key there.
    """
    if len(data) > MAX_STUDY_BYTES:
        raise study_error(f"the file is larger than the {MAX_STUDY_BYTES // 1_000_000} MB accepted", label, None,
                          None)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise study_error(f"the file is not UTF-8 text (line {line})", label, None, None) from None
    check_structure(text, label)
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        line_no = getattr(exc, "lineno", None)
        if line_no is None:
            m = re.search(r"at line (\d+)", str(exc))
            line_no = int(m.group(1)) if m else None
        if line_no is None:  # "at end of document": the file ends too early
            line_no = max(text.count("\n") + (0 if text.endswith("\n") else 1), 1)
        msg = str(exc).split(" (at ")[0]
        if "end of document" in str(exc):
            msg += " (the file ends too early)"
        key, shown = key_at_line(text, line_no)
        if "overwrite" in msg or "Cannot declare" in msg:
            msg = "duplicate key (" + msg + ")"
        raise study_error(f"TOML syntax error on line {line_no}: {msg}", label, key, shown) from None
    except ValueError:  # a 5,000-digit integer passes Python's int() digit limit
        m = re.search(r"\d{100,}", text)
        line_no = text[: m.start()].count("\n") + 1 if m else None
        key, _ = key_at_line(text, line_no)
        raise study_error(f"a number with too many digits (line {line_no})", label, key, None) from None
    except RecursionError:  # pragma: no cover - check_structure bounds the depth first
        raise study_error("the document is nested too deeply", label, None, None) from None


def key_at_line(text: str, line_no: int | None) -> tuple[str | None, str | None]:
    """Best-effort dotted key of the line ``line_no`` (1-based) and the line's text.

    Parameters
    ----------
    text : str
        The TOML text.
    line_no : int or None
        A line number (1-based).

    Returns
    -------
    tuple of (str or None, str or None)
        The key path and the line, or (None, None) when there is no such line.
    """
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
