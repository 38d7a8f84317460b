"""A seeded generator of broken study files, and a harness that runs `fluidshift check` on each.

Each case starts from one of the bundled studies (``studies/*.toml``) and its data files and applies one
to three mutations: a value's type swapped, a number made extreme (1e308, -1e300, 5e-324, NaN, inf, a
30-digit integer), a key deleted, duplicated or renamed, a string made long, a unit broken, a value
nested deeply, a data file's cells, columns or bytes changed, or the TOML text itself truncated or
spliced. The harness runs ``fluidshift check`` in-process through click's CliRunner under a per-case
time limit and sorts the outcome: refused cleanly (exit 2, one line on stderr), accepted (exit 0),
traceback (any other exit or an exception), hang (the time limit passed).

Run ``python tests/fuzz_studies.py --cases 1000`` for the figures; ``tests/test_fuzz_check.py`` runs it
in the test suite (150 cases quick, 1,000 marked slow).
"""

from __future__ import annotations

import argparse
import contextlib
import json
import math
import random
import shutil
import signal
import sys
import tempfile
import tomllib
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from click.testing import CliRunner

from uncertainty.app.cli import main

ROOT = Path(__file__).resolve().parents[1]
STUDIES = sorted((ROOT / "studies").glob("*.toml"))
DATA = ROOT / "studies" / "data"

EXTREME_NUMBERS: list[Any] = [1e308, -1e308, 1e300, -1e300, 5e-324, 0, 0.0, -1, -0.0, 10**30, -(10**30),
                              math.inf, -math.inf, math.nan, 2**63, 2**64, 1e-300, 123456789.0]
BROKEN_UNITS = ["", " ", "mmHg/0", "kPa**1e9", "nonsense", "mL/min/100 g", "1/0", "mmHg mmHg", "g/dL/0",
                "mL/min/mmHg/100kg", "m" * 300, "(((", "mmHg**mmHg", "%", "°C", "10**400 mmHg"]
ODD_STRINGS = ["", " ", "x" * 300, "y" * 200_000, "../../etc/passwd", "/dev/zero", "/proc/self/environ",
               "=cmd|' /C calc'!A0", "\u202eevil", "NaN", "inf", "1e308", "\x00", "a\nb", "skeletal_muscle ",
               "Jv", "Pc", "data", "data/", "."]


# ----------------------------------------------------------------------------- TOML writing

def _key(k: str) -> str:
    bare = k and all(c.isalnum() or c in "_-" for c in k) and k.isascii()
    return k if bare else json.dumps(k)


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)  # JSON string escapes are TOML basic-string escapes
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(x)}" for k, x in v.items()) + " }"
    return json.dumps(str(v))


def dumps(doc: dict[str, Any]) -> str:
    """A parsed study document as TOML text (tables as [sections], lists of tables as [[arrays]])."""
    head, tail = [], []
    for k, v in doc.items():
        if isinstance(v, dict):
            tail.append(f"[{_key(k)}]")
            tail += [f"{_key(a)} = {_value(b)}" for a, b in v.items()]
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            for x in v:
                tail.append(f"[[{_key(k)}]]")
                tail += [f"{_key(a)} = {_value(b)}" for a, b in x.items()]
        else:
            head.append(f"{_key(k)} = {_value(v)}")
    return "\n".join(head + tail) + "\n"


# ----------------------------------------------------------------------------- mutations

def _paths(node: Any, prefix: tuple = ()) -> Iterator[tuple]:
    """Every path (tuple of keys / indices) into the document, leaves and containers."""
    if isinstance(node, dict):
        for k, v in node.items():
            yield prefix + (k,)
            yield from _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield prefix + (i,)
            yield from _paths(v, prefix + (i,))


def _get(doc: Any, path: tuple) -> Any:
    for p in path:
        doc = doc[p]
    return doc


def _set(doc: Any, path: tuple, value: Any) -> None:
    _get(doc, path[:-1])[path[-1]] = value


def _delete(doc: Any, path: tuple) -> None:
    parent = _get(doc, path[:-1])
    if isinstance(parent, dict):
        del parent[path[-1]]
    else:
        parent.pop(path[-1])


def _nested(value: Any, depth: int, rng: random.Random) -> Any:
    for _ in range(depth):
        value = [value] if rng.random() < 0.5 else {"x": value}
    return value


def _random_value(rng: random.Random) -> Any:
    kind = rng.randrange(7)
    if kind == 0:
        return rng.choice(EXTREME_NUMBERS)
    if kind == 1:
        return rng.choice(ODD_STRINGS)
    if kind == 2:
        return rng.choice([True, False])
    if kind == 3:
        return [rng.choice(EXTREME_NUMBERS) for _ in range(rng.randrange(4))]
    if kind == 4:
        return {"dist": rng.choice(["normal", "lognormal", "beta", "fixed", "nope"]),
                rng.choice(["mean", "median", "sd", "gsd", "value", "lower", "upper"]): rng.choice(EXTREME_NUMBERS)}
    if kind == 5:
        return rng.uniform(-1e6, 1e6)
    return rng.choice(BROKEN_UNITS)


def mutate_document(doc: dict[str, Any], rng: random.Random) -> str:
    """Apply one mutation to ``doc`` in place; return its name."""
    paths = list(_paths(doc))
    path = rng.choice(paths)
    leaf = _get(doc, path)
    op = rng.choice(["swap_type", "extreme", "extreme", "delete", "rename", "long_string", "unit", "deep",
                     "duplicate_entry", "add_key", "scale"])
    if op == "swap_type":
        _set(doc, path, _random_value(rng))
    elif op == "extreme":
        numeric = [p for p in paths if isinstance(_get(doc, p), int | float) and not isinstance(_get(doc, p), bool)]
        if numeric:
            path = rng.choice(numeric)
        _set(doc, path, rng.choice(EXTREME_NUMBERS))
        op += f"={_get(doc, path)!r}"
    elif op == "scale":
        numeric = [p for p in paths if isinstance(_get(doc, p), int | float) and not isinstance(_get(doc, p), bool)]
        if numeric:
            path = rng.choice(numeric)
            x = _get(doc, path)
            _set(doc, path, type(x)(x * rng.choice([-1, 10**6, 10**-6, 1000, 0])) if x else -1)
            op += f"={_get(doc, path)!r}"
    elif op == "delete":
        _delete(doc, path)
    elif op == "rename":
        parent = _get(doc, path[:-1])
        if isinstance(parent, dict):
            new = rng.choice([str(path[-1]) + "x", str(path[-1]).upper(), "", " ", "a.b", "x" * 300,
                              "__class__", "Pc", "unit", "value"])
            parent[new] = parent.pop(path[-1])
        else:
            _set(doc, path, _random_value(rng))
    elif op == "long_string":
        strings = [p for p in paths if isinstance(_get(doc, p), str)]
        if strings:
            path = rng.choice(strings)
        _set(doc, path, rng.choice(["x" * 300, "y" * 200_000, _get(doc, path) * 1000 if isinstance(leaf, str)
                                    else "z" * 5000]))
    elif op == "unit":
        units = [p for p in paths if p and p[-1] == "unit"]
        if units:
            path = rng.choice(units)
            _set(doc, path, rng.choice(BROKEN_UNITS))
        else:
            strings = [p for p in paths if isinstance(_get(doc, p), str)]
            if strings:
                p = rng.choice(strings)
                _set(doc, p, f"{rng.choice(EXTREME_NUMBERS)} {rng.choice(BROKEN_UNITS)}")
    elif op == "deep":
        _set(doc, path, _nested(leaf, rng.choice([5, 40, 100]), rng))
    elif op == "duplicate_entry":
        lists = [p for p in paths if isinstance(_get(doc, p), list)]
        if lists:
            lst = _get(doc, rng.choice(lists))
            if lst:
                lst.extend([lst[0]] * rng.choice([1, 2, 1000]))
    else:
        parent = _get(doc, path[:-1]) if path[:-1] else doc
        if isinstance(parent, dict):
            parent[rng.choice(["bogus", "file", "unit", "value", "sd", "cv", "seed", "samples", "effects",
                               "max_samples", "tol"])] = _random_value(rng)
    return f"{op}@{'.'.join(str(p) for p in path)}"


def mutate_text(text: str, rng: random.Random) -> tuple[str, str]:
    """A text-level mutation: truncated, a line duplicated, bytes spliced in, many keys, a BOM."""
    op = rng.choice(["truncate", "dup_line", "splice", "many_keys", "bom", "deep_text"])
    lines = text.splitlines()
    if op == "truncate":
        return text[: rng.randrange(len(text))], op
    if op == "dup_line" and lines:
        i = rng.randrange(len(lines))
        lines.insert(i, lines[i])
        return "\n".join(lines) + "\n", op
    if op == "splice":
        i = rng.randrange(len(text) + 1)
        return text[:i] + rng.choice(['"', "[", "{", "]]", "=", "\\", "\x00", "'''", "\ud7ff", "#"]) + text[i:], op
    if op == "many_keys":
        return text + "[extra]\n" + "".join(f"k{i}.a.b = {i}\n" for i in range(rng.choice([100, 20_000]))), op
    if op == "bom":
        return "\ufeff" + text, op
    return text + "[deep]\nx = " + "[" * 2000 + "]" * 2000 + "\n", op


def mutate_csv(text: str, rng: random.Random) -> tuple[str, str]:
    """A data-file mutation: a cell made extreme, text, long or blank; a column or the header dropped."""
    rows = [r.split(",") for r in text.splitlines()]
    op = rng.choice(["cell", "cell", "long_cell", "drop_column", "drop_header", "empty", "bom", "binary",
                     "ragged", "semicolon"])
    if op in ("cell", "long_cell") and len(rows) > 1:
        i, j = rng.randrange(1, len(rows)), rng.randrange(len(rows[0]))
        if j < len(rows[i]):
            rows[i][j] = ("x" * 140_000 if op == "long_cell" else
                          str(rng.choice(EXTREME_NUMBERS + ["abc", "", "root:x:0:0", "-", "1,5", '"'])))
            op += f"[{i},{j}]={rows[i][j][:20]!r}"
    elif op == "drop_column" and rows and len(rows[0]) > 1:
        j = rng.randrange(len(rows[0]))
        rows = [r[:j] + r[j + 1:] for r in rows]
    elif op == "drop_header":
        rows = rows[1:]
    elif op == "empty":
        return "", op
    elif op == "bom":
        return "\ufeff" + text, op
    elif op == "binary":
        return text[: len(text) // 2] + "\udcff\x00\x01" + text[len(text) // 2:], op
    elif op == "ragged" and len(rows) > 2:
        rows[2] = rows[2] + ["extra"]
    elif op == "semicolon":
        return text.replace(",", ";"), op
    return "\n".join(",".join(r) for r in rows) + "\n", op


@dataclass
class Case:
    """One mutated study: its TOML text, data files (name -> text) and the mutations applied."""

    study: str
    text: str
    data: dict[str, str] = field(default_factory=dict)
    mutations: list[str] = field(default_factory=list)


def _data_observation(name: str) -> dict[str, Any]:
    return {"kind": "lymph_flow", "file": f"data/{name}", "sd": 0.001, "unit": "mL/min/100g",
            "columns": {"value": "value"}}


def make_case(rng: random.Random) -> Case:
    """One seeded case from a bundled study."""
    src = rng.choice(STUDIES)
    text = src.read_text(encoding="utf-8")
    doc = tomllib.loads(text)
    case = Case(study=src.name, text=text)
    roll = rng.random()
    if roll < 0.2:  # a data file mutated
        csvs = sorted(DATA.glob("*.csv"))
        csv = rng.choice(csvs)
        body, op = mutate_csv(csv.read_text(encoding="utf-8"), rng)
        name = f"mutated_{csv.name}"
        case.data[name] = body
        obs = doc.setdefault("observations", [])
        files = [o for o in obs if isinstance(o, dict) and "file" in o]
        if files and csv.name in str(files[0].get("file")):
            files[0]["file"] = f"data/{name}"
        else:
            header = body.splitlines()[0].split(",") if body.strip() else ["value"]
            ob = _data_observation(name)
            ob["columns"] = {"subject": header[0].strip() or "subject",
                             "value": rng.choice(header[1:] or header).strip() or "value"}
            obs.append(ob)
        case.mutations.append(f"csv:{op}")
        case.text = dumps(doc)
    elif roll < 0.35:  # the text itself
        case.text, op = mutate_text(text, rng)
        case.mutations.append(f"text:{op}")
    else:
        for _ in range(rng.choice([1, 1, 1, 2, 3])):
            case.mutations.append(mutate_document(doc, rng))
        case.text = dumps(doc)
    return case


# ----------------------------------------------------------------------------- running

class Hang(BaseException):
    """The per-case time limit passed (a BaseException, so no handler in the program swallows it)."""


@contextlib.contextmanager
def time_limit(seconds: float) -> Iterator[None]:
    """Raise :class:`Hang` in the main thread after ``seconds`` (SIGALRM; CPU-contended runs need slack)."""
    def on_alarm(signum: int, frame: Any) -> None:
        raise Hang()

    old = signal.signal(signal.SIGALRM, on_alarm)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)


@dataclass
class Outcome:
    """How `fluidshift check` ended on one case."""

    case: Case
    kind: str  # "refused", "accepted", "traceback", "hang"
    exit_code: int | None
    stderr: str


def run_case(case: Case, folder: Path, limit: float = 20.0) -> Outcome:
    """Write ``case`` into ``folder`` and run ``fluidshift check`` on it in-process."""
    shutil.rmtree(folder, ignore_errors=True)
    (folder / "data").mkdir(parents=True)
    for csv in DATA.glob("*.csv"):
        shutil.copy(csv, folder / "data" / csv.name)
    for name, body in case.data.items():
        (folder / "data" / name).write_bytes(body.encode("utf-8", "surrogateescape"))
    study = folder / case.study
    study.write_bytes(case.text.encode("utf-8", "surrogatepass"))
    runner = CliRunner()
    try:
        with time_limit(limit):
            result = runner.invoke(main, ["check", str(study), "--quiet"])
    except Hang:
        return Outcome(case, "hang", None, "")
    err = result.stderr
    clean_exit = result.exception is None or (isinstance(result.exception, SystemExit)
                                              and result.exit_code in (0, 2))
    if "Traceback" in result.output or "Traceback" in err or not clean_exit or result.exit_code not in (0, 2):
        return Outcome(case, "traceback", result.exit_code, err + repr(result.exception))
    if result.exit_code == 2:
        if len(err.strip().splitlines()) != 1:
            return Outcome(case, "traceback", 2, err)  # counted as a failure: not one line
        return Outcome(case, "refused", 2, err)
    return Outcome(case, "accepted", 0, err)


def run_corpus(cases: int, seed: int = 20261203, limit: float = 20.0) -> list[Outcome]:
    """Generate ``cases`` seeded cases and run each; the outcomes in order."""
    rng = random.Random(seed)
    out = []
    with tempfile.TemporaryDirectory(prefix="fluidshift-fuzz-") as tmp:
        for i in range(cases):
            case = make_case(rng)
            out.append(run_case(case, Path(tmp) / f"c{i % 4}", limit))
    return out


def figures(outcomes: list[Outcome]) -> dict[str, int]:
    """Counts by outcome: cases, refused cleanly, accepted, tracebacks, hangs."""
    kinds = [o.kind for o in outcomes]
    return {"cases": len(kinds), "refused cleanly": kinds.count("refused"), "accepted": kinds.count("accepted"),
            "tracebacks": kinds.count("traceback"), "hangs": kinds.count("hang")}


def main_(argv: list[str] | None = None) -> int:
    """Command line: run the corpus and print the figures (and each failure)."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=1000)
    ap.add_argument("--seed", type=int, default=20261203)
    ap.add_argument("--limit", type=float, default=20.0, help="seconds per case before it counts as a hang")
    args = ap.parse_args(argv)
    outcomes = run_corpus(args.cases, args.seed, args.limit)
    for o in outcomes:
        if o.kind in ("traceback", "hang"):
            print(f"{o.kind}: {o.case.study} {o.case.mutations}: {o.stderr[-400:]!r}")
    print(json.dumps(figures(outcomes)))
    return 0 if all(o.kind in ("refused", "accepted") for o in outcomes) else 1


if __name__ == "__main__":
    sys.exit(main_())
