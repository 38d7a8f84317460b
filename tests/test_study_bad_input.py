"""Malformed study files: exit status 2 and one line naming the file, the key path and the value.

Each file in tests/bad_studies/ states the expected key path (``# key:``) and, where there is one,
the offending value (``# value:``) in its header comments. A hypothesis test feeds random study
documents to ``Study.from_dict``: it returns a Study or raises StudyError, never anything else.
"""

from __future__ import annotations

import math
import os
import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from uncertainty.app.cli import main
from uncertainty.core.errors import MAX_LINE_CHARS, StudyError
from uncertainty.core.files import MAX_STUDY_BYTES
from uncertainty.core.toml_io import MAX_KEYS
from uncertainty.study import Study

BAD = Path(__file__).parent / "bad_studies"
STUDIES = Path(__file__).parents[1] / "studies"
FILES = sorted(BAD.glob("*.toml"))


def _expect(path: Path) -> tuple[str, str | None]:
    text = path.read_text()
    key = re.search(r"^# key: (.+)$", text, re.M).group(1).strip()
    m = re.search(r"^# value: (.+)$", text, re.M)
    return key, (m.group(1).strip() if m else None)


def test_corpus_is_large_enough() -> None:
    assert len(FILES) >= 25


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
def test_bad_study_exits_2_with_one_line(path: Path) -> None:
    key, value = _expect(path)
    result = CliRunner().invoke(main, ["check", str(path)])
    assert result.exit_code == 2, result.output
    assert isinstance(result.exception, SystemExit)
    err = result.stderr.strip()
    assert "Traceback" not in result.output and "Traceback" not in err
    assert len(err.splitlines()) == 1, err
    assert str(path) in err
    assert f": {key}: " in err, err
    if value is not None:
        assert value in err, err
    assert result.stdout == ""


def test_bad_study_json_mode_prints_nothing_on_stdout() -> None:
    result = CliRunner().invoke(main, ["check", str(BAD / "sd_zero.toml"), "--json"])
    assert result.exit_code == 2 and result.stdout == ""


def test_missing_study_file() -> None:
    result = CliRunner().invoke(main, ["check", str(BAD / "no_such_study.toml")])
    assert result.exit_code == 2 and "no such study file" in result.stderr


# ----------------------------------------------------------------------------- random documents

SYMBOLS = ["Pc", "Pi", "pi_c", "pi_i", "pi_g", "sigma", "Kf", "PS", "L", "Pi_L0", "Cp", "Pa", "Pv", "r",
           "C_tis", "Qx", "", "Jv"]
numbers = st.one_of(st.integers(-5, 50), st.floats(allow_nan=True, allow_infinity=True, width=32),
                    st.sampled_from([0, 1, 0.5, 1.2, -1, 1e-9, 1e300]))
scalars = st.one_of(numbers, st.booleans(), st.text(max_size=8),
                    st.sampled_from(["12 mmHg", "2 kPa", "3 cmH2O", "7 g/dL", "1 mL/min", "x"]))
dist_names = st.sampled_from(["normal", "truncnormal", "lognormal", "beta", "gamma", "uniform",
                              "triangular", "fixed", "cauchy", 3])
param_keys = st.sampled_from(["mean", "sd", "median", "gsd", "lower", "upper", "mode", "value", "unit",
                              "origin", "between_subject", "kind", "bogus"])
units_ = st.sampled_from(["mmHg", "kPa", "g/dL", "1", "mL/min/mmHg/100g", "mL/min/mmHg/100mL",
                          "mL/min/mmHg", "mL/min/100g", "kg", "nonsense"])


def _decl() -> st.SearchStrategy:
    base = st.dictionaries(param_keys, st.one_of(numbers, units_, st.dictionaries(
        st.sampled_from(["sd", "cv", "x"]), numbers, max_size=2)), max_size=5)
    with_dist = st.builds(lambda d, rest: {"dist": d, **rest}, dist_names, base)
    protein = st.builds(lambda inner: {"from_protein": inner}, st.one_of(
        with_dist, st.fixed_dictionaries({"albumin": with_dist, "globulin": with_dist})))
    return st.one_of(scalars, with_dist, protein, st.lists(numbers, max_size=2))


study_head = st.fixed_dictionaries(
    {"tissue": st.sampled_from(["skeletal_muscle", "skeletal_muscle", "lung", "glomerulus", "skin_subcutis",
                                "kidney", 5])},
    optional={
        "title": st.one_of(st.text(max_size=5), numbers),
        "model": st.sampled_from(["classic", "steady_state", "revised", "other"]),
        "seed": st.one_of(st.integers(-2, 2**64), st.text(max_size=3)),
        "conditions": st.one_of(st.lists(st.sampled_from(["sepsis", "venous_congestion", "burns", "posture",
                                                          "hypoproteinaemia", "nope"]), max_size=3),
                                st.text(max_size=4)),
        "tissue_mass": st.one_of(numbers, st.sampled_from(["3.2 kg", "3 mmHg", "800 g", "-1 kg"])),
    })
# mostly well-formed heads; sometimes a stray key or not a table at all
good_head = st.fixed_dictionaries(
    {"tissue": st.sampled_from(["skeletal_muscle", "skin_subcutis", "lung"])},
    optional={"model": st.sampled_from(["classic", "steady_state", "revised"]),
              "seed": st.integers(0, 1000), "tissue_mass": st.sampled_from(["3.2 kg", "800 g", 2.5])})


study_heads = st.tuples(st.integers(0, 9), good_head, study_head, scalars).map(
    lambda t: t[1] if t[0] < 6 else (t[2] if t[0] < 8 else ({**t[2], "extra": t[3]} if t[0] == 8 else t[3])))

observation = st.fixed_dictionaries(
    {"kind": st.sampled_from(["measurement", "lymph_flow", "clearance_rate", "swelling_rate",
                              "volume_time_course", "protein_ratio", "nonsense"])},
    optional={"parameter": st.sampled_from(SYMBOLS), "value": numbers, "sd": numbers, "cv": numbers,
              "unit": units_, "instrument": st.sampled_from(["colloid_osmometer", "wick_in_needle", "nope"]),
              "file": st.sampled_from(["data/good_volumes.csv", "data/nan_cell.csv", "absent.csv"]),
              "step": st.dictionaries(st.sampled_from(["parameter", "to", "unit", "at_min"]),
                                      st.one_of(numbers, units_), max_size=3)})

good_documents = st.fixed_dictionaries(
    {"study": study_heads},
    optional={
        "parameters": st.one_of(st.dictionaries(st.sampled_from(SYMBOLS), _decl(), max_size=4), scalars),
        "correlations": st.one_of(
            st.fixed_dictionaries({"pairs": st.lists(st.lists(st.one_of(st.sampled_from(SYMBOLS), numbers),
                                                              max_size=4), max_size=3)}),
            scalars),
        "propagate": st.dictionaries(st.sampled_from(["samples", "method", "outputs", "tol", "bad"]),
                                     st.one_of(numbers, st.sampled_from(["qmc", "mc", "x"]),
                                               st.lists(st.sampled_from(["Jv", "Pi", "zz"]), max_size=2)),
                                     max_size=3),
        "sensitivity": st.dictionaries(st.sampled_from(["samples", "method", "output"]),
                                       st.one_of(numbers, st.sampled_from(["sobol", "Jv", "x"])), max_size=3),
        "observations": st.one_of(st.lists(observation, max_size=2), scalars),
        "rank": st.dictionaries(st.sampled_from(["candidates", "budget"]), st.one_of(
            numbers, st.lists(st.dictionaries(st.sampled_from(["name", "parameter", "sd", "instrument"]),
                                              st.one_of(numbers, st.sampled_from(SYMBOLS)), max_size=4),
                              max_size=2)), max_size=2),
        "design": st.dictionaries(st.sampled_from(["effect", "alpha", "endpoint", "n_range", "design_prior"]),
                                  st.one_of(numbers, st.sampled_from(["Kf", "Jv"]),
                                            st.fixed_dictionaries({"parameter": st.sampled_from(SYMBOLS)},
                                                                  optional={"multiply": numbers,
                                                                            "shift": numbers}),
                                            st.lists(st.integers(-1, 300), max_size=3)), max_size=3),
    })
documents = st.tuples(st.integers(0, 9), good_documents, scalars).map(
    lambda t: {**t[1], "junk": t[2]} if t[0] == 0 else t[1])


@settings(max_examples=600, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(documents)
def test_random_documents_give_study_or_study_error(doc: dict) -> None:
    try:
        study = Study.from_dict(doc, path=BAD / "random.toml", base_dir=BAD)
    except StudyError as exc:
        assert exc.file is not None
        text = str(exc)
        assert "\n" not in text.strip() or len(text) < 2000
        return
    assert isinstance(study, Study)
    # a returned study is internally consistent
    assert study.correlation.shape == (len(study.names),) * 2
    assert all(math.isfinite(x) for p in study.priors.values() for x in p.params.values())


# ----------------------------------------------------------------------------- files that are not study files

def _check_one_line(path: Path | str, *more: str) -> str:
    result = CliRunner().invoke(main, ["check", str(path), *more])
    assert result.exit_code == 2, result.output
    err = result.stderr.strip()
    assert "Traceback" not in err and len(err.splitlines()) == 1, err
    assert result.stdout == ""
    return err


def test_study_path_fifo_is_refused_not_read(tmp_path: Path) -> None:
    fifo = tmp_path / "study.toml"
    os.mkfifo(fifo)
    assert "not a regular file" in _check_one_line(fifo)


def test_study_path_to_dev_zero_is_refused(tmp_path: Path) -> None:
    link = tmp_path / "study.toml"
    link.symlink_to("/dev/zero")
    assert "not a regular file" in _check_one_line(link)


def test_study_path_folder_and_symlink_loop_are_named(tmp_path: Path) -> None:
    (tmp_path / "folder.toml").mkdir()
    assert "is a folder" in _check_one_line(tmp_path / "folder.toml")
    (tmp_path / "a.toml").symlink_to(tmp_path / "b.toml")
    (tmp_path / "b.toml").symlink_to(tmp_path / "a.toml")
    assert "symbolic-link loop" in _check_one_line(tmp_path / "a.toml")


def test_study_file_too_large_too_many_keys_too_deep(tmp_path: Path) -> None:
    head = '[study]\ntissue = "skeletal_muscle"\n'
    big = tmp_path / "big.toml"
    big.write_text(head + "# " + "x" * (MAX_STUDY_BYTES + 10) + "\n")
    assert "larger than the 1 MB accepted" in _check_one_line(big)
    many = tmp_path / "many.toml"
    many.write_text(head + "[parameters]\n" + "".join(f"a{i}.b.c = 1\n" for i in range(50_000)))
    assert f"more than {MAX_KEYS:,} keys" in _check_one_line(many)
    deep = tmp_path / "deep.toml"
    deep.write_text(head + "title = " + "[" * 1000 + "]" * 1000 + "\n")
    assert "nested more than" in _check_one_line(deep)


def test_utf8_bom_study_is_accepted(tmp_path: Path) -> None:
    bom = tmp_path / "bom.toml"
    bom.write_bytes(b"\xef\xbb\xbf" + b'[study]\ntissue = "skeletal_muscle"\n')
    result = CliRunner().invoke(main, ["check", str(bom), "--quiet"])
    assert result.exit_code == 0, result.output


def test_truncated_study_names_a_line(tmp_path: Path) -> None:
    cut = tmp_path / "cut.toml"
    cut.write_text('[study]\ntissue = "skeletal_muscle"\ntitle = """an unfinished\n')
    err = _check_one_line(cut)
    assert "line None" not in err and re.search(r"line \d+", err), err


def test_data_file_content_is_never_echoed(tmp_path: Path) -> None:
    (tmp_path / "secret.csv").write_text("subject,value\nA,1\nB,hunter2-secret\n")
    study = tmp_path / "s.toml"
    study.write_text('[study]\ntissue = "skeletal_muscle"\n[[observations]]\nkind = "lymph_flow"\n'
                     'file = "secret.csv"\nsd = 0.001\n')
    err = _check_one_line(study)
    assert "hunter2" not in err and "secret.csv line 3, column value" in err


def test_long_values_are_shortened_in_the_message(tmp_path: Path) -> None:
    study = tmp_path / "s.toml"
    study.write_text('[study]\ntissue = "skeletal_muscle"\nseed = "' + "9" * 100_000 + '"\n')
    assert len(_check_one_line(study)) <= MAX_LINE_CHARS


@pytest.mark.parametrize("option", [["propagate", "--samples", "1e12"], ["rank", "--samples", "1e12"],
                                    ["sensitivity", "--samples", "1000000000000"], ["design", "--trials", "1e12"]])
def test_huge_counts_are_refused_with_a_memory_estimate(option: list[str]) -> None:
    result = CliRunner().invoke(main, [*option, str(STUDIES / "demo.toml")])
    assert result.exit_code == 2, result.output
    err = result.stderr.strip()
    assert len(err.splitlines()) == 1 and "of memory" in err and option[1] in err, err
    assert "max-samples" not in err


def test_run_stops_at_check_before_writing_a_bundle(tmp_path: Path) -> None:
    out = tmp_path / "out"
    result = CliRunner().invoke(main, ["run", str(BAD / "max_samples_below_start.toml"), "--out", str(out),
                                       "--quiet"])
    assert result.exit_code == 2, result.output
    assert "propagate.max_samples" in result.stderr
    assert not (out / "results.json").exists()
