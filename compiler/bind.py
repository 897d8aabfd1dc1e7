"""bind: the plan meets the data — the data contract, then one sample per analysis.

Every finding is collected before anything stops: a broken contract raises one
:class:`~compiler.problems.Stop` with exit 3 carrying all of them; warnings (unused columns, a
declared level never seen) travel on in ``BoundData.findings`` for the report.
"""

from __future__ import annotations

from . import contract, population
from .bound import BoundData, Table
from .plan import Plan
from .problems import Exit, stop_if_errors


def bind(plan: Plan, table: Table) -> BoundData:
    """The contract's findings and each analysis' sample; Stop (exit 3) on any error."""
    problems = contract.findings(plan, table)
    samples = []
    if table.rows_read:
        masks = population.Masks(plan, table)
        for analysis in plan.analyses:
            if any(name not in table.columns for name in _needed(plan, analysis)):
                continue  # the missing column is already a finding
            sample = population.draw(plan, analysis, table, masks)
            problems += contract.sample_findings(plan, analysis, table, sample)
            samples.append(sample)
    warnings = stop_if_errors(problems, Exit.DATA_CONTRACT)
    return BoundData(table, tuple(samples), warnings)


def _needed(plan: Plan, analysis) -> tuple[str, ...]:
    chosen = plan.population(analysis.population)
    conditions = tuple(c.variable for c in chosen.conditions) if chosen else ()
    return conditions + analysis.variables_used
