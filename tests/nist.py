"""NIST StRD Longley as test material: the data from statsmodels.datasets.longley, the
certified values from NIST ITL (quoted in /work/shared/references.md), and a writer that
puts the data and a plan on disk for tests that go through the command line.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

COVARIATES = ("GNP", "UNEMP", "ARMED", "POP", "YEAR")
COLUMNS = ("TOTEMP", "GNPDEFL") + COVARIATES

# NIST StRD "Longley", certified values (NIST ITL; Longley 1967, JASA 62:819–841),
# as quoted in references.md: (estimate, standard deviation), in design order.
CERTIFIED = {
    "intercept": (-3482258.63459582, 890420.383607373),
    "GNPDEFL": (15.0618722713733, 84.9149257747669),
    "GNP": (-0.0358191792925910, 0.0334910077722432),
    "UNEMP": (-2.02022980381683, 0.488399681651699),
    "ARMED": (-1.03322686717359, 0.214274163161675),
    "POP": (-0.0511041056535807, 0.226073200069370),
    "YEAR": (1829.15146461355, 455.478499142212),
}
CERTIFIED_R_SQUARED = 0.995479004577296
CERTIFIED_RESIDUAL_SS = 836424.055505915
CERTIFIED_RESIDUAL_SD = 304.854073561965
CERTIFIED_RESIDUAL_DF = 9


def lre(estimate: float, certified: float) -> float:
    """NIST's log relative error, −log10(|est − cert| / |cert|); 15.9 for an exact match."""
    error = abs(estimate - certified) / abs(certified)
    return 15.9 if error == 0 else float(-np.log10(error))


def longley_columns() -> dict[str, np.ndarray]:
    from statsmodels.datasets import longley

    data = longley.load_pandas().data
    return {name: data[name].to_numpy(dtype=np.float64) for name in COLUMNS}


PLAN_YAML = """\
# NIST StRD Longley as a prespec plan (a test fixture: real published data, check values only)
prespec: 1
study:
  id: nist-longley
  title: NIST StRD Longley, certified linear least squares
  version: "1"
data:
  path: longley.csv
variables:
  TOTEMP:  {kind: continuous}
  GNPDEFL: {kind: continuous}
  GNP:     {kind: continuous}
  UNEMP:   {kind: continuous}
  ARMED:   {kind: continuous}
  POP:     {kind: continuous}
  YEAR:    {kind: continuous}
analyses:
  - id: longley
    outcome: TOTEMP
    family: gaussian
    exposure: GNPDEFL
    tiers:
      - name: exposure-only
      - name: certified
        add: [GNP, UNEMP, ARMED, POP, YEAR]
    report_tier: certified
    confidence: 0.95
"""


def write_longley(directory: Path) -> Path:
    """Write longley.csv and longley.yaml into ``directory``; returns the plan's path.

    Values are written with repr, which round-trips every double exactly (the NIST data
    are short decimals, so the file reads back to the same numbers)."""
    columns = longley_columns()
    lines = [",".join(COLUMNS)]
    for i in range(len(columns["TOTEMP"])):
        lines.append(",".join(repr(float(columns[c][i])) for c in COLUMNS))
    (directory / "longley.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    plan = directory / "longley.yaml"
    plan.write_text(PLAN_YAML, encoding="utf-8")
    return plan


# NIST StRD "Pontius" (Pontius, P., NIST, load cell calibration; lower-average difficulty):
# y = B0 + B1·x + B2·x², 40 rows. Data and certified values transcribed from a public copy
# of NIST's Pontius.dat (itl.nist.gov/div898/strd/lls/data/Pontius.shtml) kept in a
# numerical package's test suite; the certified fit itself checks the transcription.
PONTIUS_Y = (
    .11019, .21956, .32949, .43899, .54803, .65694, .76562, .87487, .98292, 1.09146,
    1.20001, 1.30822, 1.41599, 1.52399, 1.63194, 1.73947, 1.84646, 1.95392, 2.06128, 2.16844,
    .11052, .22018, .32939, .43886, .54798, .65739, .76596, .87474, .98300, 1.09150,
    1.20004, 1.30818, 1.41613, 1.52408, 1.63159, 1.73965, 1.84696, 1.95445, 2.06177, 2.16829,
)
PONTIUS_X = tuple(150000.0 * (i % 20 + 1) for i in range(40))  # 150000 … 3000000, twice
PONTIUS_CERTIFIED = {
    "intercept": (0.673565789473684E-03, 0.107938612033077E-03),
    "x": (0.732059160401003E-06, 0.157817399981659E-09),
    "x^2": (-0.316081871345029E-14, 0.486652849992036E-16),
}

# NIST StRD "Norris" (Norris, J., NIST, ozone monitor calibration; lower difficulty):
# y = B0 + B1·x, 36 rows, transcribed from a public copy of NIST's Norris.dat
# (itl.nist.gov/div898/strd/lls/data/Norris.shtml); checked by the certified fit.
NORRIS = (  # (y, x)
    (0.1, 0.2), (338.8, 337.4), (118.1, 118.2), (888.0, 884.6), (9.2, 10.1), (228.1, 226.5),
    (668.5, 666.3), (998.5, 996.3), (449.1, 448.6), (778.9, 777.0), (559.2, 558.2),
    (0.3, 0.4), (0.1, 0.6), (778.1, 775.5), (668.8, 666.9), (339.3, 338.0), (448.9, 447.5),
    (10.8, 11.6), (557.7, 556.0), (228.3, 228.1), (998.0, 995.8), (888.8, 887.6),
    (119.6, 120.2), (0.3, 0.3), (0.6, 0.3), (557.6, 556.8), (339.3, 339.1), (888.0, 887.2),
    (998.5, 999.0), (778.9, 779.0), (10.2, 11.1), (117.6, 118.3), (228.9, 229.2),
    (668.4, 669.1), (449.2, 448.9), (0.2, 0.5),
)
NORRIS_CERTIFIED = {
    "intercept": (-0.262323073774029, 0.232818234301152),
    "x": (1.00211681802045, 0.429796848199937E-03),
}
NORRIS_R_SQUARED = 0.999993745883712
NORRIS_RESIDUAL_SS = 26.6173985294224
NORRIS_RESIDUAL_SD = 0.884796396144373
