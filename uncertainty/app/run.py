"""Whole-study runner: every analysis section of a study, one results bundle, one HTML report.

Order: check (load and validate), propagate, sensitivity, infer (when there are observations),
rank, design, schedule (the venous-cuff measurement schedule, or blood-sampling times in a whole_body
study), scenarios, calibrate (simulation-based calibration, heavy: only with a ``[calibrate]`` section);
each section runs only when the study has it. After each section ``results.json`` is rewritten
(atomically), so an interrupted run keeps what it finished, and the next run of the same study skips
every section whose inputs are unchanged: the study content that section depends on (the study minus
the other analysis sections, the resolved priors, data files), the seed and the package version.
``force=True`` recomputes everything.

A section whose quality gate fails keeps its result, flagged; the bundle and report are written and
:func:`run` then raises QualityGateError (exit 3) carrying the :class:`RunResult`.
"""

from __future__ import annotations

import hashlib
import json
import os
import shlex
import sys
import time
import traceback
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from uncertainty.analyses import registry
from uncertainty.app.bundle import REPORT, SCHEMA, Bundle, FileRecord, sha256_file, table_csv
from uncertainty.app.report import summary_lines, write_report
from uncertainty.app.section_checks import check_study
from uncertainty.core.errors import FluidshiftError, InputError, QualityGateError
from uncertainty.core.parallel import InProcess
from uncertainty.core.provenance import code_hash, package_version, versions
from uncertainty.core.serialise import jsonable
from uncertainty.priors import prior_rows as declared_rows
from uncertainty.study import Study, load_study

ORDER = ("check", *(a.name for a in registry.ANALYSES))
#: study-file sections that belong to one analysis (the rest of the file is shared by all)
ANALYSIS_KEYS = ("propagate", "sensitivity", "observations", "infer", "rank", "design", "schedule", "scenarios",
                 "calibrate")
#: the study-file sections each analysis depends on, beyond the shared part
DEPENDS = {"check": (), **{a.name: a.depends for a in registry.ANALYSES}}
LABELS = {"check": "check study", **{a.name: a.label for a in registry.ANALYSES}}

#: section -> callable(study, seed) returning a result object (to_dict, to_dataframe, plot), called
#: exactly as the Python API and the single commands call the analyses; replaceable (tests use stand-ins)
ANALYSES: dict[str, Callable[[Any, int | None], Any]] = {a.name: a.run for a in registry.ANALYSES}


def load(study_path: str | os.PathLike) -> Study:
    """Load and validate a study file (StudyError, exit 2, on bad input)."""
    return load_study(study_path)


#: the study loader; replaceable (tests use light stand-ins)
LOADER: Callable[[str | os.PathLike], Any] = load


def present(study: Any, name: str) -> bool:
    """True when the study has the analysis section ``name`` (check is always present)."""
    a = registry.analysis(name)
    return True if a is None else a.present(study)


# --------------------------------------------------------------------------------------------
# Inputs of a section -> key
# --------------------------------------------------------------------------------------------

def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def _raw_study(study: Any) -> Mapping[str, Any] | None:
    """The study file's tables as written (``Study.source.document``); None for a study built in memory."""
    source = getattr(study, "source", None)
    if not getattr(study, "path", None) or source is None:
        return None
    return source.document


def _dump(obj: Any) -> Any:
    if obj is None:
        return None
    if isinstance(obj, list | tuple):
        return [_dump(o) for o in obj]
    if hasattr(obj, "model_dump"):
        return jsonable(obj.model_dump(mode="json"))
    return jsonable(obj)


def prior_rows(study: Any) -> list[dict[str, Any]]:
    """Every prior the study uses as a row (``priors show`` columns: symbol, dist, median, ci95, unit,
    basis, between_subject, origin; plus params), then one row per derived quantity; canonical units."""
    priors = getattr(study, "priors", None) or {}
    try:
        rows = declared_rows(priors, getattr(study, "derived", None))
        for row in rows:
            p = priors.get(row.get("symbol"))
            if p is not None and row.get("dist") != "derived":
                row.setdefault("params", getattr(p, "params", None))
        return [jsonable(r) for r in rows]
    except (ImportError, AttributeError, TypeError):  # stand-in priors without to_row
        pass
    rows = []
    for symbol, p in priors.items():
        row: dict[str, Any] = {"symbol": symbol, "dist": getattr(p, "dist", None)}
        for attr, fn in (("median", lambda p: p.median()), ("ci95", lambda p: list(p.interval(0.95)))):
            try:
                row[attr] = fn(p)
            except Exception:  # noqa: BLE001 - a summary we cannot compute is left out, not fatal
                row[attr] = None
        for attr in ("unit", "basis", "between_subject", "origin", "params", "note"):
            row[attr] = getattr(p, attr, None)
        rows.append(jsonable(row))
    return rows


def _data_files(study: Any, raw: Mapping[str, Any] | None) -> dict[str, str]:
    """SHA-256 of every data file the observations name (relative to the study file)."""
    out: dict[str, str] = {}
    base = Path(getattr(study, "path", None) or ".").parent
    for obs in (raw or {}).get("observations", []) or []:
        f = obs.get("file") if isinstance(obs, dict) else None
        if f:
            p = Path(f) if Path(f).is_absolute() else base / f
            out[str(f)] = sha256_file(p) if p.is_file() else "missing"
    return out


def section_key(study: Any, name: str, seed: int | None) -> str:
    """SHA-256 over everything section ``name`` depends on: the shared part of the study file, its
    own study-file sections, the resolved priors, data files, the seed, the package version and the
    hash of the package's sources (``bundle.code_hash``)."""
    raw = _raw_study(study)
    if raw is not None:
        shared = {k: v for k, v in raw.items() if k not in ANALYSIS_KEYS}
        own = {k: raw.get(k) for k in DEPENDS[name]}
    else:  # a Study built in memory: its hash stands for the shared part
        shared = {"hash": getattr(study, "hash", None)}
        own = {k: _dump(getattr(study, k, None)) for k in DEPENDS[name]}
    payload = {"schema": SCHEMA, "version": package_version(), "code": code_hash(), "section": name, "seed": seed,
               "shared": shared, "own": own, "priors": prior_rows(study),
               "data": _data_files(study, raw) if "observations" in DEPENDS[name] else {}}
    text = json.dumps(jsonable(payload), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# --------------------------------------------------------------------------------------------
# Result
# --------------------------------------------------------------------------------------------

@dataclass
class RunResult:
    """A finished (or gate-flagged) whole-study run: the results document and where it lives."""

    doc: dict[str, Any]
    out_dir: Path

    @property
    def passed(self) -> bool:
        """True when no section's quality gate failed and no section raised an error."""
        return bool(self.doc["quality_gate"]["passed"])

    @property
    def report_path(self) -> Path:
        return self.out_dir / REPORT

    @property
    def summary(self) -> list[str]:
        """The one-screen summary, line by line."""
        return list(self.doc.get("summary", []))

    def section(self, name: str) -> dict[str, Any] | None:
        """The ``to_dict()`` of one analysis section (None when absent)."""
        rec = self.doc["sections"].get(name)
        return None if rec is None else rec.get("result")

    def to_dict(self) -> dict[str, Any]:
        """The results.json document."""
        return self.doc

    def to_dataframe(self) -> Any:
        """One row per section: status, whether reused, seconds, number of files, message."""
        import pandas as pd

        rows = [{"section": n, "status": r["status"], "reused": r.get("reused", False),
                 "seconds": r.get("seconds"), "files": len(r.get("files", [])), "message": r.get("message")}
                for n, r in self.doc["sections"].items()]
        return pd.DataFrame(rows).set_index("section")

    def plot(self, out_dir: str | os.PathLike | None = None) -> list[str]:
        """The bundle's figures (already written by the run); ``out_dir`` is accepted for symmetry."""
        return [str(self.out_dir / f["path"]) for r in self.doc["sections"].values()
                for f in r.get("files", []) if f["kind"] == "figure"]


# --------------------------------------------------------------------------------------------
# Progress
# --------------------------------------------------------------------------------------------

class _Progress:
    """One rich spinner line per section on stderr, or nothing."""

    def __init__(self, enabled: bool) -> None:
        self.enabled = enabled
        self.bar = None

    def __enter__(self) -> _Progress:
        if self.enabled:
            from rich.console import Console
            from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

            self.bar = Progress(SpinnerColumn(finished_text="[green]done[/]"), TextColumn("{task.description}"),
                                TimeElapsedColumn(), console=Console(stderr=True))
            self.bar.start()
        return self

    def __exit__(self, *exc: Any) -> None:
        if self.bar is not None:
            self.bar.stop()

    def start(self, name: str) -> Any:
        if self.bar is None:
            return None
        return self.bar.add_task(LABELS.get(name, name), total=1)

    def finish(self, task: Any, name: str, status: str, reused: bool = False) -> None:
        if self.bar is None or task is None:
            return
        note = {"done": "", "gate_failed": "  [yellow]quality gate failed[/]", "error": "  [red]error[/]"}[status]
        if reused:
            note += "  (unchanged, reused)"
        self.bar.update(task, completed=1, description=LABELS.get(name, name) + note)


# --------------------------------------------------------------------------------------------
# One section
# --------------------------------------------------------------------------------------------

def _check(study: Any) -> dict[str, Any]:
    # the checks themselves ran in `run` (check_study) before the bundle was opened
    names = list(getattr(study, "names", None) or [])
    return jsonable({
        "title": getattr(study, "title", None), "model": getattr(study, "model", None),
        "tissue": getattr(study, "tissue", None), "uncertain_inputs": names,
        "priors": len(getattr(study, "priors", None) or {}),
        "sections": [n for n in ORDER[1:] if present(study, n)],
        "notes": [str(n) for n in (getattr(study, "notes", None) or [])],
    })


def _save_outputs(name: str, result: Any, bundle: Bundle) -> tuple[list[FileRecord], list[str]]:
    """Tables (CSV), figures (PNG+SVG) and, for inference, posterior.nc; all atomic."""
    files: list[FileRecord] = []
    warnings: list[str] = []
    if result is None:
        return files, warnings
    # tables
    if hasattr(result, "to_dataframe"):
        try:
            frames = result.to_dataframe()
            if not isinstance(frames, dict):
                frames = {"": frames}
            for sub, df in frames.items():
                if df is None:
                    continue
                rel = f"tables/{name}{'-' + str(sub) if sub else ''}.csv"
                named_index = any(n is not None for n in getattr(df.index, "names", [None]))
                files.append(bundle.write_text(rel, table_csv(df, index=named_index), "table"))
        except Exception as exc:  # noqa: BLE001 - a table that fails is reported, the rest is kept
            warnings.append(f"table not written: {type(exc).__name__}: {exc}")
    else:
        warnings.append("this result offers no table (to_dataframe)")
    # figures
    if hasattr(result, "plot"):
        stage = bundle.stage_dir(name)
        try:
            paths = result.plot(str(stage)) or []
            if isinstance(paths, str | os.PathLike):
                paths = [paths]
            if isinstance(paths, dict):
                paths = list(paths.values())
            for p in sorted({Path(p) for p in paths}, key=str):
                if not p.is_file():
                    continue
                base = p.name if p.name.startswith(name) else f"{name}-{p.name}"
                if not p.resolve().is_relative_to(stage.resolve()):  # written elsewhere: copy in first
                    import shutil

                    staged = stage / ("copy-" + p.name)
                    shutil.copyfile(p, staged)
                    p = staged
                files.append(bundle.adopt(p, f"figures/{base}", "figure"))
        except Exception as exc:  # noqa: BLE001
            warnings.append(f"figures not written: {type(exc).__name__}: {exc}")
        finally:
            _close_figures()
    else:
        warnings.append("this result offers no figures (plot)")
    # posterior draws
    if name == "infer":
        idata = next((getattr(result, a) for a in ("idata", "inference_data", "trace", "posterior_idata")
                      if getattr(result, a, None) is not None and hasattr(getattr(result, a), "to_netcdf")), None)
        if idata is not None:
            stage = bundle.stage_dir("posterior")
            try:
                tmp = stage / "posterior.nc"
                idata.to_netcdf(str(tmp))
                files.append(bundle.adopt(tmp, "posterior.nc", "data"))
            except Exception as exc:  # noqa: BLE001
                warnings.append(f"posterior.nc not written: {type(exc).__name__}: {exc}")
        else:
            warnings.append("the inference result exposes no ArviZ InferenceData; posterior.nc not written")
    return files, warnings


def _close_figures() -> None:
    if "matplotlib.pyplot" in sys.modules:
        sys.modules["matplotlib.pyplot"].close("all")


def _run_section(name: str, study: Any, seed: int | None, key: str, bundle: Bundle, executor: Any = None
                 ) -> tuple[dict[str, Any], InputError | None]:
    started, t0 = _now(), time.perf_counter()
    status, message, result = "done", None, None
    warnings: list[str] = []
    input_error: InputError | None = None
    if name == "check":
        doc = _check(study)
        return {"name": name, "status": "done", "key": key, "started": started, "finished": _now(),
                "seconds": time.perf_counter() - t0, "reused": False, "result": doc, "files": [],
                "message": None, "warnings": []}, None
    try:
        if executor is not None and name in registry.USES_EXECUTOR:
            result = ANALYSES[name](study, seed, executor=executor)  # type: ignore[call-arg]
        else:
            result = ANALYSES[name](study, seed)
    except QualityGateError as exc:
        status, message, result = "gate_failed", str(exc), exc.result
    except InputError as exc:  # bad input found late: recorded, the other sections still run, exit 2 at the end
        status, message = "error", str(exc)
        input_error = exc
    except KeyboardInterrupt:
        raise
    except Exception as exc:  # noqa: BLE001 - one failing analysis must not lose the others
        status, message = "error", f"{type(exc).__name__}: {exc}"
        warnings.append(traceback.format_exc(limit=8))
    seconds = time.perf_counter() - t0
    doc = None
    if result is not None:
        try:
            doc = jsonable(result.to_dict())
        except Exception as exc:  # noqa: BLE001
            status = "error" if status == "done" else status
            message = (message + "; " if message else "") + f"to_dict failed: {type(exc).__name__}: {exc}"
    files, more = _save_outputs(name, result, bundle)
    warnings = more + warnings
    if isinstance(doc, dict):
        warnings = [str(w) for w in doc.get("warnings", []) or []] + warnings
    return {"name": name, "status": status, "key": key, "started": started, "finished": _now(),
            "seconds": seconds, "reused": False, "result": doc, "files": [f.model_dump() for f in files],
            "message": message, "warnings": warnings}, input_error


def _reusable(prev: dict[str, Any] | None, name: str, key: str, bundle: Bundle) -> dict[str, Any] | None:
    if not prev or name == "check":
        return None
    rec = prev.get("sections", {}).get(name)
    if not rec or rec.get("key") != key or rec.get("status") not in ("done", "gate_failed"):
        return None
    if not all(bundle.intact(f) for f in rec.get("files", [])):
        return None
    return {**rec, "reused": True}


# --------------------------------------------------------------------------------------------
# The run
# --------------------------------------------------------------------------------------------

def _study_info(study: Any, seed: int | None) -> dict[str, Any]:
    return jsonable({
        "title": getattr(study, "title", None), "path": str(getattr(study, "path", None) or "") or None,
        "hash": getattr(study, "hash", None), "seed": seed, "model": getattr(study, "model", None),
        "tissue": getattr(study, "tissue", None), "conditions": list(getattr(study, "conditions", None) or []),
        "basis": getattr(study, "basis", None),
    })


def _provenance(study: Any, seed: int | None, started: str) -> dict[str, Any]:
    import platform

    return {"package": "fluidshift", "version": package_version(), "python": platform.python_version(),
            "platform": platform.platform(), "dependencies": versions(),
            "study_path": str(getattr(study, "path", None) or "") or None, "study_hash": getattr(study, "hash", None),
            "seed": seed, "started": started, "finished": None, "command_line": shlex.join(sys.argv)}


def _gate(sections: dict[str, Any]) -> dict[str, Any]:
    failed = [n for n, r in sections.items() if r["status"] == "gate_failed"]
    errors = [n for n, r in sections.items() if r["status"] == "error"]
    return {"passed": not failed and not errors, "failed": failed, "errors": errors}


def run(study_path: str | os.PathLike, out_dir: str | os.PathLike, force: bool = False, progress: bool = True,
        seed: int | None = None, executor: Any = None) -> RunResult:
    """Run every analysis section of the study at ``study_path`` and write the bundle to ``out_dir``.

    ``seed`` overrides the study's seed. Sections whose inputs are unchanged since the last run into
    the same folder are reused unless ``force``. ``progress`` shows one spinner line per section on
    stderr. ``executor`` (:mod:`uncertainty.core.parallel`, default in-process): the sections that
    split their work into independent tasks (:data:`uncertainty.analyses.registry.USES_EXECUTOR`)
    send them there; the numbers, and so the reuse of unchanged sections, do not depend on it.
    Returns a :class:`RunResult`.

    Raises StudyError/InputError (exit 2) on bad input: before any file is written when the study
    file is invalid or any check `fluidshift check` runs refuses it (the section rules and the inference
    model declared without sampling, :func:`uncertainty.app.section_checks.check_study`); after the
    bundle is written (that section flagged as an error, the others run) when an analysis refuses its
    input all the same. QualityGateError (exit 3, ``.result`` the RunResult) when a
    section's quality gate failed, FluidshiftError (exit 1) when a section raised an error; in both
    cases the complete bundle and report are written first.
    """
    started = _now()
    study = LOADER(study_path)
    if isinstance(study, Study):  # every check `fluidshift check` runs, before the bundle is touched
        check_study(study)
    seed = getattr(study, "seed", None) if seed is None else seed
    bundle = Bundle(out_dir).open(force=force)
    try:
        prev = None if force else bundle.read_results()
        doc: dict[str, Any] = {
            "schema": SCHEMA, "complete": False, "study": _study_info(study, seed),
            "provenance": _provenance(study, seed, started), "priors": prior_rows(study),
            "notes": [str(n) for n in (getattr(study, "notes", None) or [])], "sections": {},
            "quality_gate": {"passed": True, "failed": [], "errors": []}, "summary": [], "files": [],
        }
        input_errors: list[InputError] = []
        with _Progress(progress) as bar:
            for name in ORDER:
                if not present(study, name):
                    continue
                key = section_key(study, name, seed)
                task = bar.start(name)
                rec = _reusable(prev, name, key, bundle)
                if rec is None:
                    rec, bad = _run_section(name, study, seed, key, bundle, executor)
                    input_errors += [bad] if bad is not None else []
                doc["sections"][name] = rec
                doc["quality_gate"] = _gate(doc["sections"])
                bundle.write_results(doc)  # checkpoint: an interrupted run keeps finished sections
                bar.finish(task, name, rec["status"], rec.get("reused", False))
        _remove_stale(prev, doc, bundle)
        doc["summary"] = summary_lines(doc)
        doc["provenance"]["finished"] = _now()
        report = write_report(doc, bundle)
        doc["files"] = [report.model_dump()]
        doc["complete"] = not input_errors  # a section refused its input: not complete, exit 2 below
        bundle.write_results(doc)
    except OSError as exc:  # a full disk or a folder made read-only mid-run: the last checkpoint stays valid
        raise InputError(f"cannot write the bundle ({exc.strerror or exc}); the last complete checkpoint is kept",
                         key="--out", value=str(out_dir)) from None
    finally:
        bundle.close()
    result = RunResult(doc=doc, out_dir=Path(out_dir))
    gate = doc["quality_gate"]
    if input_errors:  # bad input (exit 2), found only when its section ran
        input_errors[0].result = result  # type: ignore[attr-defined]
        raise input_errors[0]
    if gate["errors"]:
        msgs = "; ".join(f"{n}: {doc['sections'][n]['message']}" for n in gate["errors"])
        err = FluidshiftError(f"section(s) failed: {msgs} (bundle written to {out_dir})")
        err.result = result  # type: ignore[attr-defined]
        raise err
    if gate["failed"]:
        msgs = "; ".join(f"{n}: {doc['sections'][n]['message']}" for n in gate["failed"])
        raise QualityGateError(f"{msgs} (bundle written to {out_dir}, flagged)", result=result)
    return result


def _remove_stale(prev: dict[str, Any] | None, doc: dict[str, Any], bundle: Bundle) -> None:
    """Delete files a previous run recorded that this run no longer produces."""
    if not prev:
        return
    keep = {f["path"] for r in doc["sections"].values() for f in r.get("files", [])}
    keep |= {"results.json", REPORT}
    for rec in prev.get("sections", {}).values():
        for f in rec.get("files", []):
            if f["path"] not in keep:
                bundle.remove(f["path"])


# --------------------------------------------------------------------------------------------
# Several studies at once (one study per task of an executor)
# --------------------------------------------------------------------------------------------

class _StudyTask:
    """Picklable task function: one whole-study :func:`run` (on a worker), its outcome as plain data.

    The seed argument of the executor is not used: a study's numbers come from its own seed (or the
    ``seed`` override), never from the worker or the task's position."""

    def __init__(self, force: bool, seed: int | None) -> None:
        self.force, self.seed = force, seed

    def __call__(self, task: tuple[str, str], ss: Any) -> dict[str, Any]:
        study_path, out_dir = task
        try:
            res = run(study_path, out_dir, force=self.force, progress=False, seed=self.seed)
        except FluidshiftError as exc:
            partial = getattr(exc, "result", None)
            return {"doc": getattr(partial, "doc", None), "out": out_dir, "error": str(exc),
                    "exit_code": exc.exit_code}
        return {"doc": res.doc, "out": out_dir, "error": None, "exit_code": 0}


def run_many(study_paths: list[str | os.PathLike], out_dirs: list[str | os.PathLike], force: bool = False,
             progress: bool = True, seed: int | None = None, executor: Any = None) -> list[RunResult]:
    """Run several studies, one study per task of ``executor``; each writes its own bundle.

    Parameters
    ----------
    study_paths : list of path
        Study files (on a file system every worker sees; passed to the workers as absolute paths).
    out_dirs : list of path
        One bundle folder per study, all different.
    force : bool
        Recompute every section (as :func:`run`).
    progress : bool
        A progress bar of studies done on stderr.
    seed : int or None
        Overrides every study's seed.
    executor : InProcess or DaskExecutor or None
        From :func:`uncertainty.core.parallel.make_executor`; default in-process, one study after another.

    Returns
    -------
    list of RunResult
        In the order of ``study_paths``; the numbers are those of running each study on its own.

    Raises
    ------
    StudyError, InputError
        (exit 2) A study file is invalid or two studies share a bundle folder: before any work.
    FluidshiftError, QualityGateError
        After every study ran and wrote its bundle, when one failed: the first failure (in the
        order given), naming its study; ``.results`` holds every study's RunResult or None.
    """
    paths = [Path(p).resolve() for p in study_paths]
    outs = [Path(o).resolve() for o in out_dirs]
    if len(paths) != len(outs):
        raise InputError("one bundle folder per study is needed", key="--out", value=len(outs))
    seen: dict[Path, Path] = {}
    for p, o in zip(paths, outs, strict=True):
        if o in seen:
            raise InputError(f"two studies ({seen[o].name}, {p.name}) would write the same bundle folder",
                             key="--out", value=str(o))
        seen[o] = p
    for p in paths:  # every study file is checked before any work starts (exit 2, nothing written)
        LOADER(p)
    executor = executor if executor is not None else InProcess(progress=progress)
    tasks = [(str(p), str(o)) for p, o in zip(paths, outs, strict=True)]
    outcomes = executor.map(_StudyTask(force, seed), tasks, seed=0, label="studies")
    results: list[RunResult | None] = [None if o["doc"] is None else RunResult(doc=o["doc"], out_dir=Path(o["out"]))
                                       for o in outcomes]
    failed = [(p, o) for p, o in zip(study_paths, outcomes, strict=True) if o["error"] is not None]
    if failed:
        p, o = failed[0]
        more = f" ({len(failed) - 1} more failed)" if len(failed) > 1 else ""
        message = f"{p}: {o['error']}{more}"
        err: FluidshiftError
        if o["exit_code"] == QualityGateError.exit_code:
            err = QualityGateError(message, result=results)
        elif o["exit_code"] == InputError.exit_code:
            err = InputError(message)
        else:
            err = FluidshiftError(message)
        err.results = results  # type: ignore[attr-defined]
        raise err
    return [r for r in results if r is not None]
