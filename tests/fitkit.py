"""Plans, tables and samples built in code for the design and fit tests.

Terms are written as in a plan's ``add`` list: a variable name, or a dict such as
``{"power": "age", "degree": 2}``, ``{"log": "x"}``, ``{"product": ["a", "b"]}``,
``{"spline": "x", "knots": [..]}``.
"""

from __future__ import annotations

from dataclasses import fields, is_dataclass

import numpy as np

from compiler.bound import BoundData, Sample, SampleFlow, Table
from compiler.plan import (Analysis, Assumption, Covariance, DataSource, Plan, Study, Term,
                           Tier, Variable)


def term(spec) -> Term:
    if isinstance(spec, str):
        return Term("variable", (spec,))
    if "power" in spec:
        return Term("power", (spec["power"],), degree=spec["degree"])
    if "log" in spec:
        return Term("log", (spec["log"],))
    if "product" in spec:
        return Term("product", tuple(spec["product"]))
    return Term("spline", (spec["spline"],), knots=tuple(spec["knots"]))


def analysis(outcome: str, exposure: str, tiers, family: str = "gaussian", *,
             id: str = "primary", report_tier: str | None = None,
             covariance: Covariance = Covariance(), offset: str | None = None,
             confidence: float = 0.95) -> Analysis:
    """``tiers``: [(name, [added terms]), ...]; the first tier holds the exposure alone."""
    built, terms = [], (Term("variable", (exposure,)),)
    for i, (name, added) in enumerate(tiers):
        added_terms = tuple(term(a) for a in added)
        terms = terms + added_terms if i else terms
        built.append(Tier(name, added_terms if i else (), terms))
    return Analysis(id=id, outcome=outcome, family=family, exposure=exposure,
                    tiers=tuple(built), report_tier=report_tier or built[-1].name,
                    confidence=confidence, covariance=covariance, offset=offset)


def plan(variables: list[Variable], analyses: list[Analysis],
         assumptions: list[Assumption] = ()) -> Plan:
    return Plan(language=1, study=Study("fit-test"), data=DataSource(None, "csv"),
                variables=tuple(variables), populations=(), analyses=tuple(analyses),
                assumptions=tuple(assumptions))


def numeric_variables(*names: str) -> list[Variable]:
    return [Variable(name, "continuous") for name in names]


def bound(columns: dict[str, np.ndarray], analyses: list[Analysis],
          rows: np.ndarray | None = None, row_ids=None) -> BoundData:
    """Every analysis uses ``rows`` (default: all rows) of the table made of ``columns``."""
    n = len(next(iter(columns.values())))
    rows = np.arange(n, dtype=np.int64) if rows is None else np.asarray(rows, dtype=np.int64)
    ids = np.asarray([str(i + 1) for i in rows] if row_ids is None else row_ids, dtype=object)
    table = Table(path="<memory>", format="csv", sha256="0" * 64, size_bytes=0, rows_read=n,
                  columns={k: (np.asarray(v, dtype=object) if np.asarray(v).dtype.kind in "OU"
                               else np.asarray(v, dtype=np.float64))
                           for k, v in columns.items()})
    flow = SampleFlow(n, None, (), n, (), len(rows))
    return BoundData(table, tuple(Sample(a.id, rows, ids, flow) for a in analyses), ())


def walk_numbers(value, path="fit"):
    """Every (path, float) inside a fit result, arrays included."""
    if is_dataclass(value):
        for f in fields(value):
            yield from walk_numbers(getattr(value, f.name), f"{path}.{f.name}")
    elif isinstance(value, (tuple, list)):
        for i, item in enumerate(value):
            yield from walk_numbers(item, f"{path}[{i}]")
    elif isinstance(value, np.ndarray):
        if value.dtype.kind == "f":
            for i, item in enumerate(value.ravel()):
                yield f"{path}[{i}]", float(item)
    elif isinstance(value, float):
        yield path, value
