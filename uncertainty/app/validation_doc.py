"""Generate docs/validation.md from the validation table and the model's predictions.

The predictions use the fixed seed and sample size of :mod:`uncertainty.analyses.validation`, so the file
is the same on every run of the same code. ``tests/test_validation.py`` checks that the committed file
lists every row with the verdict the code gives now. Regenerate with ``python -m uncertainty.app.validation_doc``.
"""

from __future__ import annotations

import sys
from pathlib import Path

from uncertainty.analyses.validation import markdown, validate


def doc_path() -> Path:
    """Path of docs/validation.md in the source checkout."""
    return Path(__file__).resolve().parents[2] / "docs" / "validation.md"


def render() -> str:
    """The Markdown text of docs/validation.md (every row, default seed and samples)."""
    return markdown(validate())


def main(argv: list[str] | None = None) -> int:
    """Write docs/validation.md (or print it with ``--stdout``); returns the exit status (0)."""
    argv = list(sys.argv[1:] if argv is None else argv)
    text = render()
    if "--stdout" in argv:
        sys.stdout.write(text)
        return 0
    path = doc_path()
    path.write_text(text, encoding="utf-8")
    print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
