"""``solve``: the options checked, then one product, a family or a life plan solved."""

from __future__ import annotations

from optimizer.api.files import _as_file
from optimizer.api.solve_family import _solve_family
from optimizer.api.solve_life import _solve_life
from optimizer.api.solve_options import (
    FAMILY_REFUSES,
    LIFE_REFUSES,
    _deadline,
    check_method,
    family_refusal,
    life_refusal,
    requirement_options,
)
from optimizer.api.solve_product import _solve_problem


def solve(
    problem_file,
    top: int = 3,
    method: str | None = None,
    time_limit: float | None = None,
    table_time: float = 20.0,
    mixes: int = 1,
    by_architecture: bool = False,
    require_die_yield: float | None = None,
    require_sigma: float | None = None,
    require_defect_level: float | None = None,
    *,
    deadline: float | None = None,
):
    """Find the most profitable design, proven (``dieplan solve``), with the same options.

    ``method`` None is ``"auto"`` for one product (a family's search picks its own);
    ``time_limit`` bounds the whole call in seconds (``deadline``: a `time.perf_counter`
    instant, for callers that started the clock earlier). Returns a :class:`SolveResult`;
    a family file gives a :class:`FamilySolveResult` and a life file a
    :class:`LifeSolveResult` (which take ``time_limit``, ``table_time`` and, for a
    family, ``method``). Raises ProblemError. Example::

        >>> result = solve(load("problems/edge_accelerator.toml"), table_time=2)
        >>> result.architectures[["architecture", "profit", "proven"]]  # doctest: +SKIP
    """
    deadline = _deadline(time_limit, deadline)
    check_method(method)
    given = requirement_options(require_die_yield, require_sigma, require_defect_level)
    pf = _as_file(problem_file)
    given_options = dict(
        top=top,
        method=method,
        mixes=mixes,
        by_architecture=by_architecture,
        require_die_yield=require_die_yield,
        require_sigma=require_sigma,
        require_defect_level=require_defect_level,
    )
    if pf.kind == "life":
        _refuse(given_options, LIFE_REFUSES, life_refusal, pf.source)
        return _solve_life(pf, deadline, time_limit, table_time)
    if pf.kind == "family":
        _refuse(given_options, FAMILY_REFUSES, family_refusal, pf.source)
        return _solve_family(pf, deadline, method, time_limit, table_time)
    return _solve_problem(
        pf, top, method or "auto", deadline, time_limit, table_time, mixes, by_architecture, given
    )


def _refuse(given: dict, refused: dict, refusal, source: str) -> None:
    """Raise the one-line error for the first option in ``refused`` (name -> (option,
    why, default)) given a value other than its default."""
    for name, (_, _, default) in refused.items():
        if given[name] != default:
            raise refusal(name, source)
