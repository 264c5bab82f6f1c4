"""The Python API of dieplan: what the command line does, as functions returning objects.

Load a problem file once, then evaluate, solve or explore it; each call returns an
object holding the library's own results, the tables the command line prints as pandas
DataFrames, ``to_dict()`` (the command's ``--json`` output) and ``write(results_dir)``
(the command's run folder, report.html included)::

    >>> import optimizer
    >>> study = optimizer.load("problems/edge_accelerator.toml")
    >>> result = optimizer.solve(study, table_time=2)
    >>> result.best.profit                                  # doctest: +SKIP
    >>> result.architectures[["architecture", "profit"]]   # doctest: +SKIP
    >>> folder = result.write("results")                   # doctest: +SKIP

Bad input raises :class:`optimizer.errors.ProblemError` with the one line the command
line prints (``error.line()``); option names in those lines are the command's
(``--design``, ``--top``), which name the keyword arguments here too.

Figures are estimates for comparing options early in a design, like everything dieplan
prints. This package imports nothing heavy at import time (``import optimizer`` stays
light): numpy, pandas, the solver and matplotlib load inside the calls that use them.

The modules: ``files`` (loading, :class:`ProblemFile`) and ``toml_text`` (a dict written
back as TOML); ``frames`` (DataFrames, CSV and figure writers, run folders);
``evaluation``; ``solving`` (``solve``) with ``solve_options``, ``solve_product``,
``solve_family`` and ``solve_life``; ``explore_compare``, ``explore_sweep``,
``explore_sensitivity`` and ``explore_uncertainty`` with ``explore_shared``. Every public
name of those modules is re-exported here: use ``optimizer.api.NAME``.
"""

from optimizer.api.evaluation import Evaluation, FamilyEvaluation, LifeEvaluation, evaluate
from optimizer.api.evaluation import FamilyDesignPrice as FamilyDesignPrice
from optimizer.api.evaluation import in_product as in_product
from optimizer.api.explore_compare import CompareResult, compare
from optimizer.api.explore_compare import check_compare_kinds as check_compare_kinds
from optimizer.api.explore_sensitivity import SensitivityOutcome, sensitivity
from optimizer.api.explore_sensitivity import input_ranges as input_ranges
from optimizer.api.explore_shared import design_rows as design_rows
from optimizer.api.explore_shared import family_rows as family_rows
from optimizer.api.explore_shared import make_runner as make_runner
from optimizer.api.explore_sweep import SweepOutcome, sweep
from optimizer.api.explore_sweep import sweep_axes as sweep_axes
from optimizer.api.explore_uncertainty import UncertaintyOutcome, uncertainty
from optimizer.api.explore_uncertainty import check_uncertainty_top as check_uncertainty_top
from optimizer.api.files import KINDS, ProblemFile, load
from optimizer.api.frames import csv_writer as csv_writer
from optimizer.api.frames import figure_writers as figure_writers
from optimizer.api.frames import named as named
from optimizer.api.frames import records as records
from optimizer.api.solve_family import FamilySolveResult
from optimizer.api.solve_life import LifeSolveResult
from optimizer.api.solve_options import FAMILY_REFUSES as FAMILY_REFUSES
from optimizer.api.solve_options import LIFE_REFUSES as LIFE_REFUSES
from optimizer.api.solve_options import REQUIRE_OPTIONS as REQUIRE_OPTIONS
from optimizer.api.solve_options import check_method as check_method
from optimizer.api.solve_options import family_refusal as family_refusal
from optimizer.api.solve_options import life_refusal as life_refusal
from optimizer.api.solve_options import requirement_options as requirement_options
from optimizer.api.solve_product import SolveResult
from optimizer.api.solving import solve
from optimizer.api.toml_text import toml_document as toml_document
from optimizer.errors import ProblemError

# the surface for users; the names imported ``as`` themselves are re-exported too: option
# checks, refusals and table writers the command line shares with the functions here
__all__ = [
    "KINDS",
    "CompareResult",
    "Evaluation",
    "FamilyEvaluation",
    "FamilySolveResult",
    "LifeEvaluation",
    "LifeSolveResult",
    "ProblemError",
    "ProblemFile",
    "SensitivityOutcome",
    "SolveResult",
    "SweepOutcome",
    "UncertaintyOutcome",
    "compare",
    "evaluate",
    "load",
    "sensitivity",
    "solve",
    "sweep",
    "uncertainty",
]
