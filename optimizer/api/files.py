"""Problem files read for the API: :func:`load` into a :class:`ProblemFile`, read as
check/solve/evaluate read them, or as the exploration commands do."""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from optimizer.api.toml_text import toml_document
from optimizer.errors import ProblemError
from optimizer.outputs import Writer, copy_writer, short, text_writer

KINDS = ("problem", "family", "life")


@dataclass(eq=False)
class ProblemFile:
    """A problem file read and validated: its kind, the parsed object and the document.

    Attributes
    ----------
    kind
        ``"problem"`` (one product), ``"family"`` (``[[product]]`` tables) or ``"life"``
        (a ``[life]`` plan).
    parsed
        The :class:`~optimizer.problem.Problem`, :class:`~optimizer.family.Family` or
        :class:`~optimizer.life.LifePlan`.
    data
        The decoded document, as ``tomllib`` gives it.
    source
        The name every message uses: the path as given, or ``name`` for a dict.
    path
        The file, or None when loaded from a dict.

    Example::

        >>> pf = load("problems/edge_accelerator.toml")
        >>> pf.kind, pf.title                                   # doctest: +SKIP
        ('problem', 'Edge inference accelerator (invented demo)')
    """

    kind: str
    parsed: Any
    data: dict
    source: str
    path: Path | None = None
    # the exploration reading of the same document (its [[uncertain]] entries checked)
    _study: Any = field(default=None, repr=False)

    @property
    def problem(self):
        """The one product's Problem (for a life, its values at the start); None for a
        family."""
        if self.kind == "life":
            return self.parsed.base
        return self.parsed if self.kind == "problem" else None

    @property
    def title(self) -> str:
        if self.kind == "family":
            return self.parsed.title
        return self.problem.title

    @property
    def currency(self) -> str:
        if self.kind == "family":
            return self.parsed.members[0].problem.market.currency
        return self.problem.market.currency

    @property
    def stem(self) -> str:
        """The label of run folders: the file name without its suffix."""
        return Path(self.source).stem

    def problem_writer(self) -> Writer:
        """Writes the run folder's problem.toml: a copy of the file, or for a document
        given as a dict, that document as TOML (checked to read back the same)."""
        if self.path is not None:
            return copy_writer(self.path)
        return text_writer(toml_document(self.data, self.source))

    @property
    def study(self):
        """The document read as compare/sweep/sensitivity/uncertainty read it."""
        if self._study is None:
            self._study = _exploration_study(self.data, self.source)
        return self._study


def load(source: str | os.PathLike | dict, *, name: str | None = None, exploring: bool = False):
    """Read and validate a problem file, or a decoded document, into a :class:`ProblemFile`.

    ``source`` is a path, or a dict holding the document as ``tomllib`` decodes it
    (``name`` then names it in messages; default ``"<problem>"``). The checks are those
    of ``dieplan check``/``solve``/``evaluate``; with ``exploring`` those of the
    exploration commands instead (``[[uncertain]]`` entries checked too, and a life
    file's entries may name ``life.*`` paths). Raises ProblemError.

    Example::

        >>> pf = load("problems/accelerator_family.toml")
        >>> pf.kind, len(pf.parsed.members)                     # doctest: +SKIP
        ('family', 3)
    """
    from optimizer.problem import _check_nesting, read_problem_data

    if isinstance(source, dict):
        label = name or "<problem>"
        # iterative depth check first: copying a too-deep document would overflow
        _check_nesting(source, label)
        data, path = _plain(source), None
    elif isinstance(source, str | os.PathLike):
        data, label = read_problem_data(source)
        path = Path(source)
    else:
        raise ProblemError(
            short(repr(source)),
            "",
            "is neither a path nor a dict; give the path of a problem file or its decoded "
            "TOML as a dict",
        )
    if exploring:
        study = _exploration_study(data, label)
        kind = _kind_of(data)
        if kind == "family":
            parsed = study.family
        elif kind == "life":
            parsed = study.plan
        else:
            parsed = study.problem
        return ProblemFile(kind, parsed, data, label, path, study)
    return _checked(data, label, path)


def _kind_of(data: dict) -> str:
    from optimizer.family import is_family

    if is_family(data):
        return "family"
    return "life" if "life" in data else "problem"


def _checked(data: dict, source: str, path: Path | None) -> ProblemFile:
    """The reading of check/solve/evaluate: a life plan, a family, or one problem."""
    from optimizer.family import family_from_data, is_family
    from optimizer.life import has_life, life_plan
    from optimizer.problem import check_feasible, parse_problem

    if not isinstance(data, dict):
        raise ProblemError(source, "", "is not a table of sections; start from a demo file")
    if has_life(data) and not is_family(data):
        plan = life_plan(data, source)
        check_feasible(plan.base, source)
        return ProblemFile("life", plan, data, source, path)
    if is_family(data):
        if "uncertain" in data:
            # a family's [[uncertain]] entries sit at the top level (exploration reads them)
            from optimizer.explore.family_paths import family_study_from_data

            study = family_study_from_data(data, source)
            return ProblemFile("family", study.family, data, source, path, study)
        return ProblemFile("family", family_from_data(data, source), data, source, path)
    problem = parse_problem(data, source)
    check_feasible(problem, source)
    return ProblemFile("problem", problem, data, source, path)


def _exploration_study(data: dict, source: str):
    """The document as the exploration commands read it (see ``load_study``)."""
    from optimizer.explore.paths import study_from_data
    from optimizer.problem import check_feasible

    if not isinstance(data, dict):
        raise ProblemError(source, "", "is not a table of sections; start from a demo file")
    kind = _kind_of(data)
    if kind == "family":
        from optimizer.explore.family_paths import family_study_from_data

        return family_study_from_data(data, source)
    if kind == "life":
        from optimizer.explore.life_paths import life_study_from_data

        study = life_study_from_data(data, source)
    else:
        study = study_from_data(data, source)
    check_feasible(study.problem, source)
    return study


def _as_file(problem_file, exploring: bool = False) -> ProblemFile:
    if isinstance(problem_file, ProblemFile):
        return problem_file
    return load(problem_file, exploring=exploring)


def _plain(value: object) -> object:
    """A document as tomllib gives it: lists for tuples, plain numbers for numpy's."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_plain(v) for v in value]
    if hasattr(value, "item") and hasattr(value, "dtype"):
        return value.item()
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    return value
