"""What ``solve`` takes: option checks, the options a family or a life refuses, the
mandates given as options, and the time left of the call."""

from __future__ import annotations

import time

from optimizer.errors import ProblemError
from optimizer.outputs import short

REQUIRE_OPTIONS = {
    "--require-die-yield": ("min_die_yield", "a die yield above 0 and at most 1, e.g. 0.9"),
    "--require-sigma": ("min_sigma_margin", "a design margin above 0 sigma, e.g. 3"),
    "--require-defect-level": (
        "max_defect_level",
        "a defect level from 0 to below 1, e.g. 1e-4 (100 ppm)",
    ),
}

# solve options a family solve does not take: (option, why, the value that means "not given")
FAMILY_REFUSES = {
    "top": ("--top", "a family solve gives one design per product", 3),
    "mixes": ("--mixes", "process mixes are split for one product's architecture table", 1),
    "by_architecture": ("--by-architecture", "the ranked list is made for one product", False),
    "require_die_yield": ("--require-die-yield", "mandates are stated per product", None),
    "require_sigma": ("--require-sigma", "mandates are stated per product", None),
    "require_defect_level": ("--require-defect-level", "mandates are stated per product", None),
}


def check_method(method: str | None) -> None:
    """Raise the one-line error for a solve method that does not exist."""
    from optimizer.solver import METHODS

    if method is not None and method not in METHODS:
        raise ProblemError(
            "--method", short(method), f"unknown method; use one of {', '.join(METHODS)}"
        )


def requirement_options(die_yield=None, sigma=None, defect_level=None) -> dict[str, float]:
    """The mandates given as options, as [requirements] keys; each checked on its own."""
    from pydantic import ValidationError

    from optimizer.problem import Requirements

    chosen = {}
    given = zip(REQUIRE_OPTIONS.items(), (die_yield, sigma, defect_level), strict=True)
    for (option, (key, wanted)), value in given:
        if value is None:
            continue
        try:
            Requirements(**{key: value})
        except ValidationError:
            raise ProblemError(option, f"{value:g}", f"out of range; give {wanted}") from None
        chosen[key] = value
    return chosen


# solve options a life solve does not take: (option, why, default)
LIFE_REFUSES = {
    "top": ("--top", "a life solve gives the optimum and each architecture's best", 3),
    "method": ("--method", "the life is searched by its own bound and listing", None),
    "mixes": ("--mixes", "the life's decision table is by packaging and die count", 1),
    "by_architecture": ("--by-architecture", "the decision table lists every architecture", False),
    "require_die_yield": ("--require-die-yield", "mandates of a life are read from the file", None),
    "require_sigma": ("--require-sigma", "mandates of a life are read from the file", None),
    "require_defect_level": (
        "--require-defect-level",
        "mandates of a life are read from the file",
        None,
    ),
}


def life_refusal(name: str, source: str) -> ProblemError:
    """The error for a solve option a life plan's solve does not take."""
    option, why, _ = LIFE_REFUSES[name]
    if option.startswith("--require"):
        key = REQUIRE_OPTIONS[option][0]
        fix = f"drop it and state {key} in [requirements]: every period must then meet it"
    else:
        fix = "drop it"
    return ProblemError(option, "", f"does not apply to the life plan in {source} ({why}); {fix}")


def family_refusal(name: str, source: str) -> ProblemError:
    """The error for a single-product solve option given on a family file."""
    option, why, _ = FAMILY_REFUSES[name]
    if option.startswith("--require"):
        key = REQUIRE_OPTIONS[option][0]
        fix = f"drop it and state {key} in [product.requirements] of each product that must meet it"
    else:
        fix = "drop it, or write one product as its own problem file and solve that"
    return ProblemError(
        option, "", f"does not apply to the product family in {source} ({why}); {fix}"
    )


def _mandate(problem, options: dict[str, float]):
    """The file's [requirements] with the option mandates on top (None if none)."""
    from optimizer.problem import Requirements

    merged = Requirements(**{**problem.requirements.model_dump(), **options})
    return merged if merged.any() else None


def _deadline(time_limit: float | None, deadline: float | None) -> float | None:
    """A `time.perf_counter` instant: ``time_limit`` from now, or an earlier ``deadline``."""
    if time_limit is None:
        return deadline
    limit = time.perf_counter() + time_limit
    return limit if deadline is None else min(deadline, limit)


def _left(deadline: float | None) -> float | None:
    return None if deadline is None else max(0.0, deadline - time.perf_counter())
