"""dieplan: profit-maximising planner for die partitioning, process, packaging and yield targets.

Figures are estimates for comparing options early; real decisions need foundry and
assembly-house data.
"""

__version__ = "0.1.0"
