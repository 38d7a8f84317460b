"""The spinner line of a long step (``core.stage``): shown on a terminal only, replaced by its duration when the
step ends, and silent on an error or when not asked for."""

from __future__ import annotations

import sys

import pytest

from uncertainty.core.stage import stage


def _terminal(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(sys.stderr, "isatty", lambda: True, raising=False)


def test_on_a_terminal_the_step_ends_with_its_duration(capsys: pytest.CaptureFixture[str],
                                                       monkeypatch: pytest.MonkeyPatch) -> None:
    _terminal(monkeypatch)
    with stage(True, "compiling the model", "compiled the model"):
        pass
    err = capsys.readouterr().err
    assert "compiled the model in 0 s" in err


def test_nothing_when_not_asked_or_not_a_terminal(capsys: pytest.CaptureFixture[str],
                                                  monkeypatch: pytest.MonkeyPatch) -> None:
    with stage(True, "compiling", "compiled"):   # captured stderr is not a terminal
        pass
    _terminal(monkeypatch)
    with stage(False, "compiling", "compiled"):  # --quiet or --json
        pass
    assert capsys.readouterr().err == ""


def test_an_error_in_the_step_is_raised_without_a_done_line(capsys: pytest.CaptureFixture[str],
                                                            monkeypatch: pytest.MonkeyPatch) -> None:
    _terminal(monkeypatch)
    with pytest.raises(ValueError, match="bad"), stage(True, "compiling", "compiled"):
        raise ValueError("bad")
    assert "compiled in" not in capsys.readouterr().err
