"""The resolved plan: frozen, typed values that every later pass trusts.

`resolve` builds a :class:`Plan` from a schema-valid source tree and checks its meaning;
nothing after `resolve` looks at YAML again. Each value keeps the :class:`Place` it came
from, so later passes can still point back into the plan file.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Literal

from .problems import Place

PLAN_LANGUAGE_VERSION = 1

Kind = Literal["identifier", "continuous", "categorical", "binary", "count"]
Family = Literal["gaussian", "binomial", "poisson"]
Direction = Literal["two-sided", "lower", "higher"]
ConditionOp = Literal[
    "equals", "not_equals", "in", "not_in", "at_least", "at_most", "above", "below", "is_missing"
]
TermForm = Literal["variable", "power", "log", "product", "spline"]
TestKind = Literal[
    "superiority", "non-inferiority", "equivalence", "tier-selection", "change-in-estimate"
]
MultiplicityMethod = Literal["bonferroni", "holm", "hochberg", "fixed-sequence"]
CovarianceKind = Literal["classical", "HC0", "HC1", "HC2", "HC3", "cluster"]

NOWHERE = Place("<plan>", 0, 0)


def _no_place() -> Place:
    return NOWHERE


@dataclass(frozen=True)
class Variable:
    """One entry of the data dictionary. ``name`` is the data's own column name."""

    name: str
    kind: Kind
    unit: str | None = None
    label: str | None = None
    min: float | None = None
    max: float | None = None
    max_missing: float | None = None  # largest share of missing values allowed, in [0, 1]
    levels: tuple[str, ...] = ()  # categorical only, in declared order
    reference: str | None = None  # categorical only; defaults to the first level
    place: Place = field(default_factory=_no_place, compare=False)

    @property
    def is_numeric(self) -> bool:
        return self.kind in ("continuous", "count", "binary")

    def declared_range(self) -> str:
        """The text ' (declared range [LOW, HIGH])' for a message, or '' when none is declared."""
        if self.min is None and self.max is None:
            return ""
        low = "−∞" if self.min is None else f"{self.min:g}"
        high = "∞" if self.max is None else f"{self.max:g}"
        return f" (declared range [{low}, {high}])"


@dataclass(frozen=True)
class Condition:
    """One structured population condition; all conditions of a population must hold.

    ``value`` is a float for the ordered comparisons, a str/float for equals/not_equals,
    a tuple for in/not_in, and a bool for is_missing.
    """

    variable: str
    op: ConditionOp
    value: object
    place: Place = field(default_factory=_no_place, compare=False)

    def describe(self) -> str:
        words = {
            "equals": "=", "not_equals": "≠", "at_least": "≥", "at_most": "≤",
            "above": ">", "below": "<",
        }
        if self.op in words:
            return f"{self.variable} {words[self.op]} {_number(self.value)}"
        if self.op in ("in", "not_in"):
            listed = ", ".join(_number(v) for v in self.value)  # type: ignore[union-attr]
            return f"{self.variable} {'in' if self.op == 'in' else 'not in'} {{{listed}}}"
        return f"{self.variable} is {'missing' if self.value else 'not missing'}"


def _number(value: object) -> str:
    """18.0 reads as 18; other values as written."""
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


@dataclass(frozen=True)
class Population:
    name: str
    conditions: tuple[Condition, ...] = ()
    place: Place = field(default_factory=_no_place, compare=False)


@dataclass(frozen=True)
class Term:
    """One model term, as written in a tier's ``add`` list (or the exposure itself).

    ``form`` says how the term is built from ``variables``:
    variable (one), power (one, with ``degree``), log (one), product (two or more),
    spline (one, with ``knots``: a natural cubic spline with declared knots).
    """

    form: TermForm
    variables: tuple[str, ...]
    degree: int | None = None
    knots: tuple[float, ...] = ()
    place: Place = field(default_factory=_no_place, compare=False)

    @property
    def label(self) -> str:
        """The term's label before categorical expansion (design.md fixes the forms)."""
        if self.form == "variable":
            return self.variables[0]
        if self.form == "power":
            return f"{self.variables[0]}^{self.degree}"
        if self.form == "log":
            return f"log({self.variables[0]})"
        if self.form == "spline":
            return f"spline({self.variables[0]})"
        return " × ".join(self.variables)  # as compiler.columns joins a product's sides


@dataclass(frozen=True)
class Tier:
    """A tier: the previous tier's terms plus ``added``. ``terms`` is cumulative, exposure first."""

    name: str
    added: tuple[Term, ...]
    terms: tuple[Term, ...]
    place: Place = field(default_factory=_no_place, compare=False)


@dataclass(frozen=True)
class Covariance:
    kind: CovarianceKind = "classical"
    cluster: str | None = None  # the clustering variable when kind == "cluster"
    # what a rehearsal's synthetic data assume of the clusters (None: synthesize's defaults)
    icc: float | None = None
    clusters: int | None = None
    assigned: Literal["by-cluster", "within-cluster"] | None = None

    @property
    def label(self) -> str:
        return f"clustered by {self.cluster}" if self.kind == "cluster" else self.kind


@dataclass(frozen=True)
class MinimumInformation:
    """Rules that must hold before the analysis' verdicts can be decided."""

    events_per_parameter: float | None = None  # binomial: min(events, non-events) / parameters
    n: int | None = None  # smallest analysed sample


@dataclass(frozen=True)
class Analysis:
    id: str
    outcome: str
    family: Family
    exposure: str
    tiers: tuple[Tier, ...]
    report_tier: str
    confidence: float = 0.95
    population: str | None = None  # None: all rows
    covariance: Covariance = Covariance()
    offset: str | None = None  # poisson: log(offset variable) enters with coefficient 1
    minimum_information: MinimumInformation = MinimumInformation()
    place: Place = field(default_factory=_no_place, compare=False)

    def tier(self, name: str) -> Tier:
        return next(t for t in self.tiers if t.name == name)

    @property
    def variables_used(self) -> tuple[str, ...]:
        """Every variable any tier uses, plus outcome, exposure, offset and cluster: the
        complete-case set, so that every tier is fitted on the same rows."""
        seen: dict[str, None] = {self.outcome: None, self.exposure: None}
        for term in self.tiers[-1].terms:
            seen.update(dict.fromkeys(term.variables))
        if self.offset:
            seen[self.offset] = None
        if self.covariance.cluster:
            seen[self.covariance.cluster] = None
        return tuple(seen)


@dataclass(frozen=True)
class Decision:
    """A pre-specified decision rule.

    superiority: the exposure effect differs from zero in ``direction``.
    non-inferiority: the one-sided interval clears ``margin`` (a difference for gaussian,
        a ratio for binomial/poisson); ``direction`` says which side is favourable.
    equivalence: the 1 − 2α interval lies inside ``margins`` (low, high).
    tier-selection: walk the nested comparisons at ``alpha``; report the selected tier.
    change-in-estimate: flag |change| of the exposure estimate from ``from_tier`` to
        ``tier`` above ``threshold``.
    ``level`` names the exposure level for a categorical exposure with more than two levels.
    """

    id: str
    analysis: str
    test: TestKind
    tier: str  # defaults to the analysis' report tier
    alpha: float = 0.05
    direction: Direction = "two-sided"
    level: str | None = None
    margin: float | None = None
    margins: tuple[float, float] | None = None
    from_tier: str | None = None
    threshold: float = 0.10
    place: Place = field(default_factory=_no_place, compare=False)


@dataclass(frozen=True)
class Assumption:
    """An assumption check with a pre-specified fallback for the named decisions.

    check "constant-variance": Breusch–Pagan on the report tier; falls back when p < p_below.
    check "dispersion": Pearson dispersion (poisson/binomial); falls back when > above.
    """

    id: str
    analysis: str
    check: Literal["constant-variance", "dispersion"]
    fallback: Covariance
    applies_to: tuple[str, ...]  # decision ids
    p_below: float | None = None
    above: float | None = None
    place: Place = field(default_factory=_no_place, compare=False)


@dataclass(frozen=True)
class Multiplicity:
    """A family of decisions held together to a family-wise ``alpha``."""

    method: MultiplicityMethod
    alpha: float
    decisions: tuple[str, ...]  # in the stated order (it matters for fixed-sequence)
    place: Place = field(default_factory=_no_place, compare=False)


@dataclass(frozen=True)
class Study:
    id: str
    title: str | None = None
    version: str | None = None


@dataclass(frozen=True)
class DataSource:
    path: str | None  # relative to the plan file; `--data` overrides
    format: str | None  # csv | tsv | parquet | xpt | dta; None: from the extension
    row_id: str | None = None
    missing: tuple[str, ...] = ("", "NA")
    expected_rows: int | None = None  # rehearsal's default size


@dataclass(frozen=True)
class Plan:
    language: int
    study: Study
    data: DataSource
    variables: tuple[Variable, ...]
    populations: tuple[Population, ...]
    analyses: tuple[Analysis, ...]
    decisions: tuple[Decision, ...] = ()
    assumptions: tuple[Assumption, ...] = ()
    multiplicity: tuple[Multiplicity, ...] = ()
    source: str = "<plan>"  # the plan file's path as given

    def variable(self, name: str) -> Variable:
        return self._variables_by_name[name]

    @cached_property
    def _variables_by_name(self) -> dict[str, Variable]:
        # the design asks for each term's variables once per block of rows: a dict, not a scan
        return {v.name: v for v in self.variables}

    def population(self, name: str | None) -> Population | None:
        return None if name is None else next(p for p in self.populations if p.name == name)

    def analysis(self, analysis_id: str) -> Analysis:
        return next(a for a in self.analyses if a.id == analysis_id)

    @property
    def columns_used(self) -> tuple[str, ...]:
        """Every data column the plan needs, in dictionary order."""
        used: set[str] = set()
        for a in self.analyses:
            used.update(a.variables_used)
            population = self.population(a.population)
            if population:
                used.update(c.variable for c in population.conditions)
        if self.data.row_id:
            used.add(self.data.row_id)
        return tuple(v.name for v in self.variables if v.name in used)
