"""Values read back out of a results document, in one place.

`prespec qualify` reads the fitted numbers of its reference problems out of results.json, and
`prespec compare` reads the parts of two bundles it names by kind (data, verdicts,
amendments). Both read through these functions only, so that a change of the results
document's key names is made here and nowhere else in either command.
"""

from __future__ import annotations

# A tier's design columns, and the keys of one column's row.
TIER_COLUMNS = "columns"
COLUMN_LABEL = "column"
COLUMN_ESTIMATE = "estimate"
COLUMN_STANDARD_ERROR = "standard_error"
# Tier-level values by what they mean (``tier_value``) → the key results.json uses.
TIER_KEYS = {"r_squared": "r_squared", "rss": "rss", "sigma2": "sigma2",
             "residual_df": "residual_df", "deviance": "deviance"}


def analysis(document: dict, analysis_id: str) -> dict:
    return next(a for a in document["analyses"] if a["id"] == analysis_id)


def tier(document: dict, analysis_id: str, tier_name: str) -> dict:
    return next(t for t in analysis(document, analysis_id)["tiers"] if t["name"] == tier_name)


def column(tier_record: dict, label: str) -> dict | None:
    """The row of one design column (by its label), or None when the tier has no such column."""
    return next((row for row in tier_record[TIER_COLUMNS] if row[COLUMN_LABEL] == label), None)


def column_value(row: dict, what: str):
    """``what`` is "estimate" or "standard_error"."""
    return row[COLUMN_ESTIMATE if what == "estimate" else COLUMN_STANDARD_ERROR]


def column_reason(row: dict) -> str | None:
    return row.get("reason")


def tier_value(tier_record: dict, what: str):
    return tier_record.get(TIER_KEYS[what])


def tier_reason(tier_record: dict) -> str | None:
    return tier_record.get("reason")


# ---------------------------------------------------------------------------------------------
# The parts `compare` names by kind


def data_record(document: dict) -> dict:
    """{sha256, rows_read, file} of the data a bundle ran on."""
    data = document.get("data") or {}
    return {"sha256": data.get("sha256"), "rows_read": data.get("rows_read"),
            "file": data.get("file")}


def verdicts(document: dict) -> dict[str, str]:
    """Decision id → verdict."""
    return {d["id"]: d["verdict"] for d in document.get("decisions") or []}


def amendments(document: dict) -> list[dict]:
    """The amendment log the bundle's run carried (empty when it matched no lock)."""
    return list(document.get("amendments") or [])


def stamp_of(document: dict) -> str:
    if document.get("rehearsal"):
        return "REHEARSAL"
    return "PRE-REGISTERED" if document.get("preregistered") else "NOT PRE-REGISTERED"


# Parts of the document that compare reports under their own headings, not as values.
NAMED_PARTS = ("format", "plan", "data", "environment", "decisions", "amendments", "lock",
               "preregistered", "rehearsal", "rehearsal_note", "rehearsal_settings")
