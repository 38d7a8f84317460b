"""Data files named by observations: CSV reading and validation.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

from uncertainty.core.errors import study_error
from uncertainty.study.schema import CSV_COLUMNS, TEXT_COLUMNS, TIME_COLUMNS, Observation


def read_csv(ob: Observation, base_dir: Path, file: str, key: str) -> tuple[Path, dict[str, list]]:
    """Resolve and validate an observation's CSV: required columns, numeric cells, no NaN, times rising."""
    fkey = f"{key}.file"
    if ob.file is None:
        raise study_error("the observation names no data file", file, fkey, None)
    p = Path(ob.file)
    p = p if p.is_absolute() else (base_dir / p)
    if not p.is_file():
        raise study_error(f"data file not found (looked for {p})", file, fkey, ob.file)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise study_error(f"cannot read the data file ({exc})", file, fkey, ob.file) from None
    rows = list(csv.reader(line for line in text.splitlines() if line.strip() and not line.startswith("#")))
    if not rows:
        raise study_error("the data file is empty", file, fkey, ob.file)
    header = [h.strip() for h in rows[0]]
    if len(set(header)) != len(header):
        raise study_error("the data file repeats a column name", file, fkey, header)
    required = list(CSV_COLUMNS[ob.kind])
    missing = [c for c in required if c not in header]
    if ob.kind == "volume_time_course" and not any(t in header for t in TIME_COLUMNS):
        missing.append(" or ".join(TIME_COLUMNS))
    if missing:
        raise study_error(f"the data file lacks column(s) {', '.join(missing)} (has {', '.join(header)})", file, fkey,
                   ob.file)
    if len(rows) < 2:
        raise study_error("the data file has no data rows", file, fkey, ob.file)
    cols: dict[str, list] = {h: [] for h in header}
    for r, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            raise study_error(f"{p.name} line {r}: expected {len(header)} cells, found {len(row)}", file, fkey, row)
        for h, cell in zip(header, row, strict=True):
            cell = cell.strip()
            if h in TEXT_COLUMNS:
                if not cell:
                    raise study_error(f"{p.name} line {r}: empty {h}", file, fkey, cell)
                cols[h].append(cell)
                continue
            try:
                x = float(cell)
            except ValueError:
                raise study_error(f"{p.name} line {r}, column {h}: not a number", file, fkey, cell) from None
            if not math.isfinite(x):
                raise study_error(f"{p.name} line {r}, column {h}: NaN or infinite value", file, fkey, cell)
            cols[h].append(x)
    tcol = next((t for t in TIME_COLUMNS if t in header), None)
    if tcol is not None:
        last: dict[str, float] = {}
        for i, (s, t) in enumerate(zip(cols["subject"], cols[tcol], strict=True)):
            if s in last and not t > last[s]:
                raise study_error(f"{p.name} line {i + 2}: {tcol} must increase within subject {s}", file, fkey, t)
            last[s] = t
    if "volume" in cols:
        for i, v in enumerate(cols["volume"]):
            if v < 0:
                raise study_error(f"{p.name} line {i + 2}: volume must be non-negative", file, fkey, v)
    return p, cols
