"""Data files named by observations: CSV reading and validation.

A data file is read in long format, one reading a row: subject, optional group, optional time, the
value (``volume`` for a volume time course) and an optional per-row sd. The observation's ``columns``
map says which column plays which part (``columns = { subject = "patient_id", time = "day", value =
"COP_mmHg" }``); columns it does not name are not read, so a wide file (one column per quantity) serves
several observations, each naming its own value column. Times are converted to minutes (units s, min,
h, day). A blank value, subject or (time course) time cell is a missing reading: the row is skipped and
counted in a note. Errors name the data file, the line and the column, and show at most the offending
cell, shortened: nothing else of a data file's content is echoed.
"""

from __future__ import annotations

import csv
import io
import math
import re
from pathlib import Path
from typing import Any

from uncertainty.core.errors import InputError, StudyError, study_error
from uncertainty.core.files import MAX_DATA_BYTES, read_limited
from uncertainty.study.schema import CSV_COLUMNS, TIME_COLUMNS, TIME_UNITS, Observation, TimeColumn

#: Longest cell (characters) an error message shows; longer cells are cut with "...".
MAX_SHOWN = 24

#: Column names (lower case) that state a time unit by themselves: ``day``, ``hours``, ``t_s``, ``time (min)``.
_UNIT_WORDS = {"s": "s", "sec": "s", "secs": "s", "second": "s", "seconds": "s",
               "min": "min", "mins": "min", "minute": "min", "minutes": "min",
               "h": "h", "hr": "h", "hrs": "h", "hour": "h", "hours": "h",
               "d": "day", "day": "day", "days": "day"}


class DataColumns(dict):
    """The columns of a data file read for one observation (a dict: role -> list, one entry per kept row).

    Keys: ``subject`` (str), ``group`` (str or None, when the file has a group column), ``time_min``
    (float, when it has a time column), ``value`` (``volume`` for a volume time course; in the
    observation's declared unit), ``sd`` (float or nan for a blank cell, when it has an sd column) and
    ``line`` (the row's line number in the file). Attributes: ``source`` (the file name), ``headers``
    (role -> the column's name in the file), ``skipped`` (rows left out for blank cells) and ``notes``.
    """

    source: str
    headers: dict[str, str]
    skipped: int
    notes: list[str]


def shorten(cell: Any, limit: int = MAX_SHOWN) -> str:
    """A cell as an error message may show it: stripped and cut to ``limit`` characters.

    Parameters
    ----------
    cell : Any
        The cell (or column name) as read.
    limit : int
        Largest number of characters shown (default :data:`MAX_SHOWN`).

    Returns
    -------
    str
        The text, with ``...`` where it was cut.
    """
    text = str(cell).strip().replace("\n", " ")
    return text if len(text) <= limit else text[: limit - 3] + "..."


def time_unit_of(name: str) -> str | None:
    """The time unit a column name states, or None.

    ``time_s`` / ``time_min`` / ``time_h`` / ``time_day``, a unit word (``day``, ``hours``), a suffix
    after ``_`` (``t_s``) or a unit in brackets (``time (min)``, ``t [h]``).

    Parameters
    ----------
    name : str
        A column name.

    Returns
    -------
    str or None
        One of ``s``, ``min``, ``h``, ``day`` (keys of ``TIME_UNITS``).
    """
    low = name.strip().lower()
    m = re.search(r"[(\[]\s*([a-z]+)\s*[)\]]\s*$", low)
    for word in ([m.group(1)] if m else []) + [low, low.rsplit("_", 1)[-1] if "_" in low else ""]:
        if word in _UNIT_WORDS:
            return _UNIT_WORDS[word]
    return None


def _value_role(kind: str) -> str:
    return "volume" if kind == "volume_time_course" else "value"


def _where(p: Path, line: int | None = None, column: str | None = None) -> str:
    out = p.name
    if line is not None:
        out += f" line {line}"
    if column is not None:
        out += f", column {shorten(column)}"
    return out


def _decode(ob: Observation, p: Path, file: str, fkey: str) -> str:
    try:
        raw = read_limited(p, MAX_DATA_BYTES, what="data file", label=file, key=fkey, value=ob.file)
    except InputError as exc:  # missing, a folder, a FIFO or device, a loop, unreadable, too large
        looked = f" (looked for {shorten(p, 120)})" if exc.reason.startswith("no such") else ""
        raise study_error(exc.reason + looked, file, fkey, ob.file) from None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise study_error(f"{_where(p, line)}: not UTF-8 text (save the file as UTF-8 CSV)", file, fkey,
                          ob.file) from None


def _delimiter(text: str) -> str:
    """Comma, or semicolon / tab where the first line has no comma but one of those."""
    first = next((ln for ln in text.splitlines() if ln.strip() and not ln.startswith("#")), "")
    if "," not in first:
        for d in (";", "\t"):
            if d in first:
                return d
    return ","


def _rows(text: str, delimiter: str) -> list[tuple[int, list[str]]]:
    """(line number, cells) of each row that is not blank or a ``#`` comment."""
    reader = csv.reader(io.StringIO(text), delimiter=delimiter)
    out = []
    start = 1
    try:
        for cells in reader:
            line = start
            start = reader.line_num + 1
            if not cells or not any(c.strip() for c in cells) or cells[0].lstrip().startswith("#"):
                continue
            out.append((line, cells))
    except csv.Error as exc:  # name the line the reader stopped at
        raise csv.Error(f"{exc}; line {start}") from None
    return out


def _roles(ob: Observation, header: list[str], p: Path, file: str, key: str) -> tuple[dict[str, int], str | None]:
    """Column index of each role (subject, group, time, value, sd) and the time unit."""
    fkey, ckey = f"{key}.file", f"{key}.columns"
    cmap = ob.columns
    index = {h: j for j, h in enumerate(header)}
    value_role = _value_role(ob.kind)
    roles: dict[str, int] = {}
    unit: str | None = None

    def find(role: str, name: str, mapped: bool, required: bool) -> None:
        if name not in index:
            if mapped:
                raise study_error(f"{p.name} has no column {shorten(name)!r} (named by the column map)", file,
                                  f"{ckey}.{role}", shorten(name))
            if required:
                hint = (f"; name it in the column map: columns = {{ {'value' if role == value_role else role} "
                        f"= \"...\" }}")
                raise study_error(f"{p.name} has no {role} column{hint}", file, fkey, ob.file)
            return
        if header.count(name) > 1:
            raise study_error(f"{p.name} has two columns named {shorten(name)!r}", file,
                              f"{ckey}.{role}" if mapped else fkey, shorten(name))
        roles[role] = index[name]

    for role, default in (("subject", "subject"), ("group", "group"), ("value", value_role), ("sd", "sd")):
        mapped = getattr(cmap, role, None) if cmap is not None else None
        find(value_role if role == "value" else role, mapped or default, mapped is not None,
             role in ("subject", "value"))
    if "sd" in roles and ob.kind == "volume_time_course":
        raise study_error("a volume_time_course takes its reading noise from sd (or estimates it), not from "
                          "an sd column", file, f"{ckey}.sd" if cmap and cmap.sd else fkey, ob.file)
    tmap = cmap.time if cmap is not None else None
    if isinstance(tmap, TimeColumn):
        find("time", tmap.column, True, False)
        unit = tmap.unit
    elif isinstance(tmap, str):
        find("time", tmap, True, False)
        unit = time_unit_of(tmap)
        if unit is None:
            raise study_error(f"say the unit of the time column {shorten(tmap)!r}: time = {{ column = "
                              f"\"{shorten(tmap)}\", unit = \"min\" }} (s, min, h or day)", file, f"{ckey}.time",
                              shorten(tmap))
    else:
        present = [t for t in TIME_COLUMNS if t in index]
        if len(present) > 1:
            raise study_error(f"{p.name} has more than one time column ({', '.join(present)}); name one in "
                              "the column map", file, fkey, ob.file)
        if present:
            find("time", present[0], False, False)
            unit = present[0].split("_", 1)[1]
    if ob.kind == "volume_time_course" and "time" not in roles:
        raise study_error(f"{p.name} has no time column ({' or '.join(TIME_COLUMNS)}, or columns = {{ time = "
                          "{ column = \"...\", unit = \"min\" } })", file, fkey, ob.file)
    for role in CSV_COLUMNS[ob.kind]:
        if role not in roles:  # pragma: no cover - find() raised already
            raise study_error(f"{p.name} has no {role} column", file, fkey, ob.file)
    return roles, unit


def _number(cell: str, decimal_comma: bool) -> float:
    return float(cell.replace(",", ".") if decimal_comma else cell)


def read_csv(ob: Observation, base_dir: Path, file: str, key: str) -> tuple[Path, dict[str, list]]:
    """Resolve, read and validate an observation's data file.

    Parameters
    ----------
    ob : Observation
        The observation (its ``file``, ``kind``, ``columns``, ``sd`` / ``cv`` / ``instrument``).
    base_dir : Path
        Folder a relative ``file`` is read from (the study file's folder).
    file : str
        The study file, for error messages.
    key : str
        The observation's key path, e.g. ``observations[2]``.

    Returns
    -------
    Path
        The resolved data file.
    DataColumns
        Its columns by role (see :class:`DataColumns`): times in min, values and sd in the observation's
        declared unit, one entry per kept row; ``notes`` counts skipped rows and negative volumes.

    Raises
    ------
    StudyError
        (exit 2) A missing or unreadable file; a column the kind needs or the map names that the file lacks;
        a row with more or fewer cells than the first line; a cell that is not a number, NaN or infinite;
        an sd that is not positive; a value outside the kind's range; times not rising within a subject
        (volume time course); no data rows. Each names the file, the line and the column.
    """
    fkey = f"{key}.file"
    if ob.file is None:
        raise study_error("the observation names no data file", file, fkey, None)
    p = Path(ob.file)
    p = p if p.is_absolute() else (base_dir / p)
    text = _decode(ob, p, file, fkey)
    delimiter = _delimiter(text)
    try:
        rows = _rows(text, delimiter)
    except csv.Error as exc:  # a cell past the csv module's field limit (131,072 characters), a NUL byte
        why = "a cell longer than 131,072 characters" if "field larger" in str(exc) else "malformed CSV"
        m = re.search(r"; line (\d+)$", str(exc))
        where = _where(p, int(m.group(1))) if m else p.name
        raise study_error(f"{where}: not a readable CSV file ({why})", file, fkey, ob.file) from None
    if not rows:
        raise study_error("the data file is empty", file, fkey, ob.file)
    header = [h.strip() for h in rows[0][1]]
    roles, unit = _roles(ob, header, p, file, key)
    value_role = _value_role(ob.kind)
    to_min = TIME_UNITS[unit] if unit is not None else 1.0
    # a volume time course estimates its reading noise when it states none
    has_error = (ob.sd is not None or ob.cv is not None or ob.instrument is not None
                 or ob.kind == "volume_time_course")
    if "sd" in roles and ob.cv is not None:
        raise study_error(f"{p.name} has an sd column but the observation gives cv; give sd (the default for "
                          "blank sd cells) or drop the column", file, f"{key}.cv", ob.cv)
    if "sd" not in roles and not has_error:
        raise study_error("give the measurement error: sd, cv or instrument (or an sd column in the data file)",
                          file, f"{key}.sd", None)
    data = DataColumns({"subject": [], value_role: [], "line": []})
    for role in ("group", "sd"):
        if role in roles:
            data[role] = []
    if "time" in roles:
        data["time_min"] = []
    data.source = p.name
    data.headers = {("value" if r == value_role else r): header[j] for r, j in roles.items()}
    blank: dict[str, int] = {}
    last_time: dict[str, float] = {}
    decimal_comma = delimiter == ";"
    n_rows = len(rows) - 1
    for line, cells in rows[1:]:
        if len(cells) != len(header):
            hint = " (a decimal comma in an unquoted number?)" if len(cells) > len(header) else ""
            raise study_error(f"{_where(p, line)}: {len(cells)} cells where the first line has {len(header)}{hint}",
                              file, fkey, ob.file)
        get = {r: cells[j].strip() for r, j in roles.items()}
        needed = ["subject", value_role] + (["time"] if ob.kind == "volume_time_course" else [])
        empty = next((r for r in needed if r in get and not get[r]), None)
        if empty is not None:
            name = header[roles[empty]]
            blank[name] = blank.get(name, 0) + 1
            continue
        parsed: dict[str, float] = {}
        for r in (value_role, "time", "sd"):
            if r not in get or (r != value_role and not get[r]):
                continue
            try:
                x = _number(get[r], decimal_comma)
            except ValueError:
                raise study_error(f"{_where(p, line, header[roles[r]])}: not a number", file, fkey,
                                  ob.file) from None
            if not math.isfinite(x):
                raise study_error(f"{_where(p, line, header[roles[r]])}: NaN or infinite value", file, fkey,
                                  ob.file)
            parsed[r] = x
        _check_row(ob, parsed, has_error, value_role, p, line, header, roles, get, file, fkey)
        if ob.kind == "volume_time_course":
            s_, t_ = get["subject"], parsed["time"]
            if s_ in last_time and not t_ > last_time[s_]:
                raise study_error(f"{_where(p, line, header[roles['time']])}: time must increase within each "
                                  "subject (it does not on this row)", file, fkey, ob.file)
            last_time[s_] = t_
        data["subject"].append(get["subject"])
        data[value_role].append(parsed[value_role])
        data["line"].append(line)
        if "group" in roles:
            data["group"].append(get["group"] or None)
        if "sd" in roles:
            data["sd"].append(parsed.get("sd", math.nan))
        if "time" in roles:
            data["time_min"].append(parsed["time"] * to_min if "time" in parsed else math.nan)
    if not data["subject"]:
        why = " (every row has a blank cell)" if blank else ""
        raise study_error(f"the data file has no data rows{why}", file, fkey, ob.file)
    data.skipped = sum(blank.values())
    data.notes = []
    if blank:
        parts = ", ".join(f"blank {shorten(c)} in {n}" for c, n in blank.items())
        data.notes.append(f"{key} ({p.name}): {data.skipped} of {n_rows} rows skipped as missing ({parts})")
    if value_role == "volume":
        neg = sum(v < 0 for v in data["volume"])
        if neg:
            data.notes.append(f"{key} ({p.name}): {neg} of {len(data['volume'])} volume readings are below zero; "
                              "kept (the curve model fits a per-subject baseline offset)")
    return p, data


def _check_row(ob: Observation, parsed: dict[str, float], has_error: bool, value_role: str, p: Path, line: int,
               header: list[str], roles: dict[str, int], get: dict[str, str], file: str, fkey: str) -> None:
    """Per-row checks: sd positive (or a default error), values inside the kind's range."""
    def fail(role: str, message: str) -> StudyError:
        return study_error(f"{_where(p, line, header[roles[role]])}: {message}", file, fkey, ob.file)

    if "sd" in parsed and not parsed["sd"] > 0:
        raise fail("sd", "sd must be positive")
    if "sd" in roles and "sd" not in parsed and not has_error:
        raise fail("sd", "blank sd and the observation gives no sd, cv or instrument")
    v = parsed[value_role]
    if ob.kind == "filtration_fraction" and not 0 < v < 1:
        raise fail(value_role, "a filtration fraction lies strictly between 0 and 1")
    if ob.kind == "protein_ratio" and not 0 < v <= 1.5:
        raise fail(value_role, "a protein concentration ratio lies between 0 and about 1")
    if ob.cv is not None and not v > 0:
        raise fail(value_role, "a cv (lognormal) error needs positive values")


def data_notes(observations: list[Observation] | None) -> list[str]:
    """Notes of the observations' data files (rows skipped as missing, negative volumes).

    Parameters
    ----------
    observations : list of Observation or None
        A study's validated observations.

    Returns
    -------
    list of str
        One line per note, in observation order.
    """
    out: list[str] = []
    for ob in observations or []:
        out += list(getattr(ob.data, "notes", []) or [])
    return out
