"""The qualification report: qualification.json → report.html → report.pdf.

The view model formats every value; templates/qualification.html only lays it out. The
PDF's dates come from SOURCE_DATE_EPOCH, else 1970-01-01 (compiler.render.render_pdf), so a
second qualification on the same installation gives the same bytes.
"""

from __future__ import annotations

import os

SCOPE = ("This report qualifies this installation of prespec, on this machine, and nothing "
         "else. It shows that the installed program and libraries reproduce certified and "
         "published reference values here; it says nothing of any plan, study, data set, "
         "other machine or other installation, each of which needs its own evidence.")
CAUTION = ("prespec's output supports, and does not replace, review by a qualified "
           "statistician under the regulations and guidance that apply.")
METHOD = ("Each reference problem was written as a plan file and a CSV data file and run "
          "through the code `prespec run --unlocked` runs (check, read, bind, design, fit, "
          "decide, results.json); its values were read back from results.json. Holm's "
          "example and the handbook quantiles call the functions the decisions and tests "
          "call. Agreement is NIST's log relative error (LRE: about the number of correct "
          "significant digits; 15.9 for an exact match).")
LEGEND = ("LRE is relative, or absolute (−log10 |value|) where the reference is 0. A published "
          "or tabled value passes within half a unit of its last printed digit; its tolerance "
          "is the LRE that allows. 'null expected' checks pass when prespec declines to compute "
          "a value that has none (the standard errors of an exact fit).")


def view(document: dict, digest: str) -> dict:
    checks = document["checks"]
    failed = [c for c in checks if not c["passed"]]
    by_problem: dict[str, list] = {}
    for c in checks:
        by_problem.setdefault(c["id"].split(".")[0], []).append(c)
    problems = [{"title": p["title"], "source": p["source"], "outcome": p["outcome"],
                 "basis": p["tolerance_basis"], "passed": _count(by_problem.get(p["id"], []))}
                for p in document["problems"]]
    for name, title, source in (("holm", "Holm's step-down procedure", checks_source(by_problem, "holm")),
                                ("quantile", "t, F and χ² quantiles", checks_source(by_problem, "quantile"))):
        problems.append({"title": title, "source": source, "outcome": "computed",
                         "basis": "exact arithmetic: LRE ≥ 12" if name == "holm" else
                         "within half a unit of the tabled digits",
                         "passed": _count(by_problem.get(name, []))})
    outcome = (f"Qualified: all {len(checks)} checks met their tolerances."
               if not failed else f"NOT QUALIFIED: {len(failed)} of {len(checks)} checks missed "
                                  "their tolerances (listed as missed below).")
    return {"scope": SCOPE, "caution": CAUTION, "method": METHOD, "legend": LEGEND,
            "outcome": outcome, "problems": problems, "digest": digest,
            "digest_short": f"sha256 {digest[:12]}",
            "not_yet": [f"{n['id']}: {n['source']} — needs {n['needs']}"
                        for n in document["not_yet_expressible"]],
            "environment": _environment_rows(document["environment"]),
            "checks": [_check_row(c) for c in checks]}


def checks_source(by_problem: dict, name: str) -> str:
    return "; ".join(sorted({c["source"] for c in by_problem.get(name, [])}))


def _count(checks: list) -> str:
    return f"{sum(c['passed'] for c in checks)} of {len(checks)}"


def _number(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, str):
        return value
    return f"{value:.15g}".replace("-", "−")


def _check_row(c: dict) -> dict:
    null = c["rule"] == "null"
    return {"id": c["id"], "quantity": c["quantity"], "note": c["note"] or "",
            "value": _number(c["value"]),
            "reference": "null expected" if null else _number(c["reference"]),
            "lre": "" if c["lre"] is None else f"{c['lre']:.2f}" + (
                " abs" if c["measure"] == "absolute" else ""),
            "tolerance": "" if c["tolerance"] is None else f"≥ {c['tolerance']:.2f}",
            "result": "met" if c["passed"] else "MISSED", "cls": "" if c["passed"] else "missed"}


def _environment_rows(environment: dict) -> list[dict]:
    rows = [{"name": name, "value": value} for name, value in environment["libraries"].items()]
    for blas in environment["blas"]:
        rows.append({"name": f"{blas.get('user_api')} ({blas.get('internal_api')})",
                     "value": ", ".join(f"{k} {v}" for k, v in blas.items()
                                        if k not in ("user_api", "internal_api"))})
    cpu = environment["cpu"]
    rows.append({"name": "processor", "value": f"{cpu['model']} ({cpu['machine']}, "
                                               f"{cpu['logical_cores']} logical cores)"})
    return rows


def render(document: dict, digest: str) -> tuple[bytes, bytes]:
    from jinja2 import Environment, FileSystemLoader, StrictUndefined

    from .render import render_pdf
    from .resources import templates_dir

    env = Environment(loader=FileSystemLoader(str(templates_dir())), autoescape=True,
                      undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True,
                      keep_trailing_newline=True)
    html = env.get_template("qualification.html").render(v=view(document, digest))
    given = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    epoch = int(given) if given.isdigit() else 0
    return html.encode("utf-8"), render_pdf(html, epoch=epoch)
