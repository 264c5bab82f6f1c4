"""dieplan: profit-maximising planner for die partitioning, process, packaging and yield targets.

Figures are estimates for comparing options early; real decisions need foundry and
assembly-house data.

The Python API (:mod:`optimizer.api`) is reachable from here, loaded on first use so that
``import optimizer`` stays light::

    import optimizer
    result = optimizer.solve(optimizer.load("problems/edge_accelerator.toml"))
"""

__version__ = "0.1.0"

# names of optimizer.api offered here; the package loads when one is first used
_API = (
    "load",
    "evaluate",
    "solve",
    "compare",
    "sweep",
    "sensitivity",
    "uncertainty",
    "ProblemFile",
    "ProblemError",
)


def __getattr__(name: str):
    if name in _API:
        from optimizer import api

        return getattr(api, name)
    raise AttributeError(f"module 'optimizer' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted([*globals(), *_API])
