"""The base every analysis result stands on, and the descriptor the application layer iterates.

A :class:`Result` offers ``to_dict()`` (its section of results.json), ``to_dataframe()``,
``plot(out_dir)``, ``table()`` (the text its command prints), ``html_section()`` (its part of
report.html), ``save(out_dir)`` (its tables under ``--out``) and ``from_dict(doc)``. An
:class:`Analysis` names one analysis for the runner, the report and the commands (its section name,
title, how to run it, its report pieces), so that none of them imports an analysis by name.
"""

from __future__ import annotations

import abc
import dataclasses
import os
from collections.abc import Callable
from typing import Any, ClassVar


class Result(abc.ABC):
    """What every analysis returns (DESIGN.md section 5 for the ``to_dict`` layouts)."""

    #: file name of the CSV table ``save`` writes (``{output}`` etc. filled from ``to_dict()``)
    table_file: ClassVar[str] = ""
    #: whether that CSV carries the DataFrame's index
    table_index: ClassVar[bool] = False
    #: the line a command prints after writing ``--out`` files (``{out}`` the folder); None: none
    saved_note: ClassVar[str | None] = None

    @abc.abstractmethod
    def to_dict(self) -> dict[str, Any]:
        """The result's JSON document (canonical units; NaN kept, made null when serialised)."""

    @abc.abstractmethod
    def to_dataframe(self) -> Any:
        """The result's main table as a pandas DataFrame."""

    @abc.abstractmethod
    def plot(self, out_dir: str) -> list[str]:
        """Write the result's figures (PNG and SVG) into ``out_dir``; their paths."""

    @abc.abstractmethod
    def table(self) -> str:
        """The plain-text table the analysis's command prints."""

    @abc.abstractmethod
    def html_section(self) -> str:
        """The result's section of report.html (without heading, notes and figures)."""

    @classmethod
    @abc.abstractmethod
    def from_dict(cls, doc: dict[str, Any]) -> Result:
        """The result rebuilt from its ``to_dict()`` (draws and fitted objects are not kept there)."""

    def save(self, out_dir: str) -> dict[str, str]:
        """Write the result's table as CSV into ``out_dir`` (created when missing).

        Parameters
        ----------
        out_dir : str
            The folder.

        Returns
        -------
        dict of str to str
            ``{"table": path}``.
        """
        os.makedirs(out_dir, exist_ok=True)
        path = os.path.join(out_dir, self.table_file.format(**self.to_dict()))
        self.to_dataframe().to_csv(path, index=self.table_index)
        return {"table": path}


@dataclasses.dataclass
class DocumentResult(Result, abc.ABC):
    """A result that is its JSON document (``doc``), plus whatever a subclass keeps beside it."""

    doc: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        """The JSON document (DESIGN.md section 5)."""
        return self.doc

    @classmethod
    def from_dict(cls, doc: dict[str, Any]) -> DocumentResult:
        """The result around a stored document.

        Parameters
        ----------
        doc : dict
            A ``to_dict()`` (for instance one section's ``result`` in results.json).

        Returns
        -------
        DocumentResult
            The result of this class holding ``doc``.
        """
        return cls(doc=doc)


#: (substring of the figure's file name or "" for any, method of the result or "" for any, sentence)
Caption = tuple[str, str, str]


@dataclasses.dataclass(frozen=True)
class Analysis:
    """One analysis as the runner, the report and the commands see it.

    Attributes
    ----------
    name : str
        Its section name in the study file's run order and in results.json.
    title : str
        Heading of its report section.
    label : str
        Its line in the run's progress display.
    depends : tuple of str
        The study-file sections its result depends on, beyond the shared part.
    run : callable
        ``run(study, seed)`` -> :class:`Result`, as the Python API and the commands call it.
    from_dict : callable
        ``from_dict(doc)`` -> :class:`Result`.
    present : callable
        ``present(study)`` -> bool: whether the study asks for this analysis.
    section_html : callable
        ``section_html(doc)`` -> str: the report section from the stored document (defensive:
        any mapping renders).
    summary : callable
        ``summary(doc)`` -> list of str: its lines of the one-screen summary.
    captions : tuple of Caption
        One sentence per figure; the first row whose file-name part and method match wins.
    diagnostics : callable or None
        ``diagnostics(doc)`` -> str: its part of the report's Diagnostics section.
    """

    name: str
    title: str
    label: str
    depends: tuple[str, ...]
    run: Callable[[Any, int | None], Result]
    from_dict: Callable[[dict[str, Any]], Result]
    present: Callable[[Any], bool]
    section_html: Callable[[dict[str, Any]], str]
    summary: Callable[[dict[str, Any]], list[str]]
    captions: tuple[Caption, ...] = ()
    diagnostics: Callable[[dict[str, Any]], str] | None = None
