"""Tables and run folders shared by the result objects: DataFrames built from rows or
from the reports' CSV text, CSV and figure writers, and :class:`_RunFolder`."""

from __future__ import annotations

import os
from pathlib import Path
from typing import TYPE_CHECKING

from optimizer.outputs import Writer, clean, figure_writer, text_writer, write_run_folder

if TYPE_CHECKING:
    import pandas as pd


def records(frame: pd.DataFrame) -> list[dict]:
    """A table as JSON-ready rows (NaN as null)."""
    return clean(frame.to_dict(orient="records"))


def named(frame: pd.DataFrame, objective: str) -> pd.DataFrame:
    """The frame with its objective columns named for the objective: the library keeps
    ``profit`` in every frame; a life's are ``npv`` (``profit_low`` -> ``npv_low``)."""
    if objective == "profit":
        return frame
    return frame.rename(columns=lambda c: c.replace("profit", objective))


def csv_writer(frame: pd.DataFrame) -> Writer:
    return text_writer(frame.to_csv(index=False))


def figure_writers(stem: str, figure, title: str = "") -> dict[str, Writer]:
    """PNG and SVG writers of a figure, marked as invented data when the title says so."""
    from optimizer.explore.plots import mark_invented

    if "invented" in title.lower():
        mark_invented(figure)
    return {
        f"{stem}.png": figure_writer(figure, dpi=130),
        f"{stem}.svg": figure_writer(figure),
    }


def _frame(rows: list[dict]) -> pd.DataFrame:
    import pandas as pd

    return pd.DataFrame(rows)


def _csv_frame(text: str) -> pd.DataFrame:
    """A table the reports write as CSV text, read back value for value: numbers through
    ``float``/``int`` (exact for the repr the reports write), blanks as missing."""
    import csv
    import io

    import pandas as pd

    def value(cell: str) -> object:
        if cell == "":
            return None
        if cell in ("True", "False"):
            return cell == "True"
        for kind in (int, float):
            try:
                return kind(cell)
            except ValueError:
                continue
        return cell

    reader = csv.reader(io.StringIO(text))
    header = next(reader, None)
    if header is None:
        return pd.DataFrame()
    return pd.DataFrame([[value(c) for c in row] for row in reader], columns=header)


class _RunFolder:
    """``files()`` (name -> writer) and ``write(results_dir)`` for a result object."""

    command = ""

    def files(self) -> dict[str, Writer]:  # pragma: no cover - every result defines it
        raise NotImplementedError

    @property
    def label(self) -> str:
        return self.problem_file.stem

    def write(self, results_dir: str | os.PathLike = "results") -> Path:
        """Write the command's run folder under ``results_dir`` in one atomic step (report
        included) and return its path; raises ProblemError if it cannot be written."""
        return write_run_folder(Path(results_dir), self.command, self.label, self.files())
