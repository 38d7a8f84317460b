"""The results bundle of a whole-study run: ``results.json`` (schema below), CSV tables, figures,
``posterior.nc`` and ``report.html``, all in one folder.

Every file lands atomically: it is written in full to a temporary file in the hidden staging folder
``DIR/.partial/`` (same file system), flushed to disk and then moved into place with ``os.replace``.
Ctrl-C or a crash therefore never leaves a half-written file among the bundle's files; at worst a
partial temporary file remains in ``DIR/.partial/``, which the next run removes.

``results.json`` is validated against :class:`ResultsDoc` (pydantic) when it is written and when it
is read back; ``results_schema()`` gives the JSON Schema (documented in docs/results.md).
"""

from __future__ import annotations

import contextlib
import fcntl
import hashlib
import json
import os
import shutil
import tempfile
from pathlib import Path, PurePosixPath
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

from uncertainty.core.errors import InputError
from uncertainty.core.serialise import jsonable, to_json

SCHEMA = "fluidshift-results/1"
RESULTS = "results.json"
REPORT = "report.html"
STAGING = ".partial"
LOCK = ".lock"
#: What a bundle folder may hold besides results.json; a folder with anything else and no results.json is
#: someone else's and is refused unless --force.
BUNDLE_ENTRIES = frozenset({RESULTS, REPORT, "tables", "figures", "posterior.nc", STAGING, LOCK})

SectionName = Literal["check", "propagate", "sensitivity", "infer", "rank", "design", "schedule", "scenarios",
                      "calibrate", "validation"]


# --------------------------------------------------------------------------------------------
# Schema
# --------------------------------------------------------------------------------------------

def is_bundle_path(rel: str) -> bool:
    """True when ``rel`` names a file inside a bundle: relative, '/'-separated, no '..', no drive."""
    p = PurePosixPath(rel)
    return bool(rel) and not p.is_absolute() and ".." not in p.parts and "\\" not in rel and ":" not in rel


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class FileRecord(_Strict):
    """One file of the bundle, relative to the bundle folder, with its SHA-256 and size (bytes)."""

    path: str = Field(description="path relative to the bundle folder, '/'-separated")
    kind: Literal["figure", "table", "data", "report", "results"]
    sha256: str = Field(min_length=64, max_length=64)
    bytes: int = Field(ge=0)

    @field_validator("path")
    @classmethod
    def _inside(cls, v: str) -> str:
        if not is_bundle_path(v):
            raise ValueError(f"a bundle file must lie inside the bundle folder: {v[:200]!r}")
        return v


class SectionRecord(_Strict):
    """What one analysis section produced in a run."""

    name: SectionName
    status: Literal["done", "gate_failed", "error"] = Field(
        description="done; gate_failed (ran, but its quality gate failed; result still kept); error")
    key: str = Field(description="SHA-256 of the section's inputs (study content it depends on, seed, version)")
    started: str = Field(description="ISO 8601 UTC time the section started")
    finished: str = Field(description="ISO 8601 UTC time the section finished")
    seconds: float = Field(ge=0, description="wall time of the computation, s")
    reused: bool = Field(False, description="true when this run reused a previous run's section unchanged")
    result: dict[str, Any] | None = Field(None, description="the analysis's to_dict() (DESIGN.md section 5)")
    files: list[FileRecord] = Field(default_factory=list)
    message: str | None = Field(None, description="quality-gate or error message")
    warnings: list[str] = Field(default_factory=list)


class Provenance(_Strict):
    """Where the numbers came from: software versions, study file, seed, times, command line."""

    package: str = Field(description="the distribution name, fluidshift")
    version: str = Field(description="its version")
    python: str = Field(description="Python version")
    platform: str = Field(description="operating system and machine")
    dependencies: dict[str, str | None] = Field(description="installed version of each dependency (null: absent)")
    study_path: str | None = Field(description="the study file")
    study_hash: str | None = Field(description="SHA-256 of the study file's bytes")
    seed: int | None = Field(description="the seed used")
    started: str = Field(description="ISO 8601 UTC start of the run")
    finished: str | None = Field(description="ISO 8601 UTC end of the run (null until it ends)")
    command_line: str = Field(description="the command line (shell-quoted)")


class StudyInfo(_Strict):
    """The study that was run (from its [study] section and prior set)."""

    title: str | None = Field(None, description="[study] title")
    path: str | None = Field(None, description="the study file")
    hash: str | None = Field(None, description="SHA-256 of the study file's bytes")
    seed: int | None = Field(None, description="the seed used (the study's, or the --seed override)")
    model: str | None = Field(None, description="classic | steady_state | revised")
    tissue: str | None = Field(None, description="the prior set")
    conditions: list[str] = Field(default_factory=list, description="condition modifiers applied")
    basis: str | None = Field(None, description="basis of Kf and Jv: 100g, 100mL or organ")


class GateInfo(_Strict):
    """Whether every section passed its quality gate and none raised an error."""

    passed: bool = Field(description="true when no section failed its gate or raised an error")
    failed: list[str] = Field(default_factory=list, description="sections whose quality gate failed")
    errors: list[str] = Field(default_factory=list, description="sections that raised an error")


class ResultsDoc(_Strict):
    """The top level of ``results.json``."""

    schema_: Literal["fluidshift-results/1"] = Field(SCHEMA, alias="schema", description="schema name and version")
    complete: bool = Field(description="false while a run is under way or when it was interrupted")
    study: StudyInfo = Field(description="the study that was run")
    provenance: Provenance = Field(description="software versions, study file hash, seed, times, command line")
    priors: list[dict[str, Any]] = Field(default_factory=list,
                                         description="every prior used: symbol, dist, median, ci95, unit, "
                                                     "basis, between_subject, origin")
    notes: list[str] = Field(default_factory=list, description="the study's notes (e.g. dropped correlations)")
    sections: dict[str, SectionRecord] = Field(default_factory=dict,
                                               description="one record per section run, in run order")
    quality_gate: GateInfo = Field(description="the run's quality gate over all sections")
    summary: list[str] = Field(default_factory=list, description="the one-screen summary, line by line")
    files: list[FileRecord] = Field(default_factory=list, description="report and other top-level files")

    model_config = ConfigDict(extra="forbid", populate_by_name=True)


def results_schema() -> dict[str, Any]:
    """JSON Schema of results.json (draft 2020-12, from the pydantic models)."""
    return ResultsDoc.model_json_schema(by_alias=True)


def validate(doc: dict[str, Any], *, file: str | None = None) -> ResultsDoc:
    """Validate a results document; InputError naming the first bad key otherwise."""
    try:
        return ResultsDoc.model_validate(doc)
    except ValidationError as exc:
        err = exc.errors()[0]
        key = ".".join(str(p) for p in err["loc"])
        raise InputError(f"results document does not match {SCHEMA}: {err['msg']}", file=file, key=key,
                         value=err.get("input") if not isinstance(err.get("input"), dict) else None) from exc


def dump(doc: dict[str, Any]) -> str:
    """Validate and serialise a results document (JSON, 2-space indent, NaN as null)."""
    model = validate(jsonable(doc))
    return to_json(model.model_dump(by_alias=True, mode="json")) + "\n"


# --------------------------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------------------------

#: First characters that make a spreadsheet program read a cell as a formula (OWASP "CSV injection"; common
#: practice): such text cells are written with a leading apostrophe, which the programs show as text.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_safe(cell: Any) -> Any:
    """A text cell that a spreadsheet would read as a formula, prefixed with an apostrophe; others as is."""
    if isinstance(cell, str) and cell.startswith(FORMULA_STARTS):
        return "'" + cell
    return cell


def table_csv(df: Any, index: bool = False) -> str:
    """CSV text of a pandas DataFrame with every text cell, column and index name spreadsheet-safe."""
    safe = df.map(spreadsheet_safe)
    safe.columns = [spreadsheet_safe(c) for c in safe.columns]
    if index:
        safe.index = safe.index.map(spreadsheet_safe)
    return safe.to_csv(index=index)


def sha256_file(path: str | os.PathLike) -> str:
    """SHA-256 (hex) of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


# --------------------------------------------------------------------------------------------
# The bundle folder
# --------------------------------------------------------------------------------------------

class Bundle:
    """A results folder whose files are only ever replaced whole (temporary file + os.replace)."""

    def __init__(self, out_dir: str | os.PathLike) -> None:
        self.root = Path(out_dir)
        if self.root.exists() and not self.root.is_dir():
            raise InputError("the output path exists and is not a folder", key="--out", value=str(out_dir))
        self.staging = self.root / STAGING
        self._lock: int | None = None

    def open(self, force: bool = False) -> Bundle:
        """Create the folder, lock it for this run and make a fresh staging area (removing leftovers of an
        interrupted run).

        Raises
        ------
        InputError
            When the folder holds files and is not a bundle (unless ``force``), when another run holds
            its lock, or when it cannot be written (read-only, full disk).
        """
        if not force and self.root.is_dir() and not (self.root / RESULTS).exists():
            foreign = sorted(p.name for p in self.root.iterdir() if p.name not in BUNDLE_ENTRIES)
            if foreign:
                raise InputError("the output folder holds files that are not a fluidshift bundle; choose a new "
                                 "or empty folder, or use --force", key="--out", value=str(self.root))
        try:
            self.root.mkdir(parents=True, exist_ok=True)
            self._lock = os.open(self.root / LOCK, os.O_RDWR | os.O_CREAT, 0o666 & ~_umask())
        except OSError as exc:
            raise InputError(f"cannot write to the output folder ({exc.strerror})", key="--out",
                             value=str(self.root)) from None
        try:
            fcntl.flock(self._lock, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(self._lock)
            self._lock = None
            raise InputError("another fluidshift run is writing this output folder; wait for it or choose "
                             "another folder", key="--out", value=str(self.root)) from None
        shutil.rmtree(self.staging, ignore_errors=True)
        try:
            self.staging.mkdir()
        except OSError as exc:
            self.close()
            raise InputError(f"cannot write to the output folder ({exc.strerror})", key="--out",
                             value=str(self.root)) from None
        return self

    def close(self) -> None:
        """Remove the staging area (temporary files of this run) and release the folder's lock."""
        shutil.rmtree(self.staging, ignore_errors=True)
        if getattr(self, "_lock", None) is not None:
            os.close(self._lock)  # closing the descriptor releases the flock
            self._lock = None

    def path(self, rel: str) -> Path:
        """The file ``rel`` of the bundle; InputError when it would lie outside the bundle folder
        (a recorded path such as ``../x``, an absolute path, or a link leading out)."""
        if not is_bundle_path(rel):
            raise InputError("a bundle file must lie inside the bundle folder", file=str(self.root), value=rel[:200])
        target = self.root / rel
        root = self.root.resolve()
        if not target.parent.resolve().is_relative_to(root):
            raise InputError("a bundle file must lie inside the bundle folder (a link leads out)",
                             file=str(self.root), value=rel[:200])
        return target

    def stage_dir(self, name: str) -> Path:
        """A fresh empty folder inside the staging area, e.g. for an analysis's plot(out_dir)."""
        self.staging.mkdir(parents=True, exist_ok=True)
        return Path(tempfile.mkdtemp(prefix=f"{name}-", dir=self.staging))

    def adopt(self, staged: str | os.PathLike, rel: str, kind: str) -> FileRecord:
        """Move a complete staged file into the bundle at ``rel`` (atomic); its record."""
        staged = Path(staged)
        _fsync(staged)
        target = self.path(rel)
        target.parent.mkdir(parents=True, exist_ok=True)
        os.replace(staged, target)
        _fsync(target.parent)
        return FileRecord(path=rel, kind=kind, sha256=sha256_file(target), bytes=target.stat().st_size)

    def write_bytes(self, rel: str, data: bytes, kind: str) -> FileRecord:
        """Write ``data`` to ``rel`` atomically; its record."""
        self.staging.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=Path(rel).name + ".", dir=self.staging)
        try:
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
            os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the file the usual permissions
            return self.adopt(tmp, rel, kind)
        except BaseException:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)
            raise

    def write_text(self, rel: str, text: str, kind: str) -> FileRecord:
        return self.write_bytes(rel, text.encode("utf-8"), kind)

    def write_results(self, doc: dict[str, Any]) -> None:
        """Validate and write results.json atomically."""
        self.write_text(RESULTS, dump(doc), "results")

    def read_results(self) -> dict[str, Any] | None:
        """The previous run's results.json, validated; None when absent or not valid.

        Raises
        ------
        InputError
            When the previous results.json names a file outside the bundle folder: such a bundle is
            refused (nothing is read, reused or deleted) rather than quietly treated as absent.
        """
        doc = read_results(self.root, missing_ok=True)
        if doc is None and (self.root / RESULTS).is_file():
            with contextlib.suppress(OSError, ValueError, UnicodeDecodeError):
                raw = json.loads((self.root / RESULTS).read_text(encoding="utf-8"))
                named = [f.get("path") for s in (raw.get("sections") or {}).values() if isinstance(s, dict)
                         for f in (s.get("files") or []) if isinstance(f, dict)]
                named += [f.get("path") for f in (raw.get("files") or []) if isinstance(f, dict)]
                outside = [p for p in named if isinstance(p, str) and not is_bundle_path(p)]
                if outside:
                    raise InputError("results.json names files outside the bundle folder; remove the folder "
                                     "or run with --force", file=str(self.root / RESULTS), value=outside[0][:200])
        return doc

    def intact(self, record: FileRecord | dict[str, Any]) -> bool:
        """True when the recorded file exists with the recorded SHA-256."""
        rec = record if isinstance(record, FileRecord) else FileRecord.model_validate(record)
        p = self.path(rec.path)
        return p.is_file() and p.stat().st_size == rec.bytes and sha256_file(p) == rec.sha256

    def remove(self, rel: str) -> None:
        """Delete a bundle file if present (e.g. a figure of a section no longer in the study)."""
        with contextlib.suppress(FileNotFoundError):
            self.path(rel).unlink()


def read_results(out_dir: str | os.PathLike, *, missing_ok: bool = False) -> dict[str, Any] | None:
    """Read and validate ``DIR/results.json``; InputError when invalid (None when missing and allowed)."""
    path = Path(out_dir) / RESULTS
    if not path.is_file():
        if missing_ok:
            return None
        raise InputError("no results.json in this folder", file=str(path))
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        if missing_ok:
            return None
        raise InputError(f"results.json is not valid JSON: {exc}", file=str(path)) from exc
    try:
        validate(doc, file=str(path))
    except InputError:
        if missing_ok:
            return None
        raise
    return doc


def _umask() -> int:
    mask = os.umask(0o22)
    os.umask(mask)
    return mask


def _fsync(path: Path) -> None:
    """Flush a file or a folder (its entries) to disk; best effort."""
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)

