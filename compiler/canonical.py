"""Canonical bytes, the canonical plan form, and plain-words differences between two forms.

Canonical JSON (used for results.json, manifest.json and every digest of a JSON value):
UTF-8, keys sorted, separators ``,`` and ``:``, non-ASCII kept as is, NaN and Infinity
refused, floats in Python's shortest round-trip form, and one trailing newline.

The canonical plan form is the resolved :class:`~compiler.plan.Plan` as plain data:
every ``place`` and ``Plan.source`` left out (so comments and layout do not count),
``Tier.terms`` left out (it is derived from the exposure and the ``add`` lists), null
values and empty lists left out (so adding an optional field to the plan types does not
unfreeze older plans), whole-valued floats written as integers (``min: 0`` and
``min: 0.0`` mean the same), and two fields named as the plan language names them
(``Tier.added`` → ``add``, ``Population.conditions`` → ``where``).
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from typing import Callable, Iterable

_RENAMED = {"added": "add", "conditions": "where"}
_DROPPED = {"place", "source", "terms"}


def canonical_bytes(value) -> bytes:
    """The canonical JSON bytes of a JSON-ready value. Raises ValueError on NaN/Infinity."""
    text = json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False)
    return (text + "\n").encode("utf-8")


def sha256_hex(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def digest(value) -> str:
    """sha256 of a JSON-ready value's canonical bytes."""
    return sha256_hex(canonical_bytes(value))


def plan_form(plan) -> dict:
    """The canonical form of a resolved plan (see the module docstring)."""
    return _form(plan)


def plan_digest(plan) -> str:
    return digest(plan_form(plan))


def _form(value):
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        out = {}
        for f in dataclasses.fields(value):
            if f.name in _DROPPED:
                continue
            item = _form(getattr(value, f.name))
            if item is None or item == []:
                continue
            out[_RENAMED.get(f.name, f.name)] = item
        return out
    if isinstance(value, (tuple, list)):
        return [_form(v) for v in value]
    if isinstance(value, dict):
        return {str(k): _form(v) for k, v in value.items()}
    if isinstance(value, bool) or value is None or isinstance(value, (str, int)):
        return value
    if isinstance(value, float):
        if value.is_integer() and abs(value) < 2**53:
            return int(value)
        return value
    raise TypeError(f"no canonical form for {type(value).__name__}")


# ---------------------------------------------------------------------------------------------
# Differences, one plain line per change


KeyOf = Callable[[dict], "str | None"]


def _default_key(item: dict) -> str | None:
    """Results entries by id, name, tier and design column, covariance, tiers compared, row or
    reason."""
    def text(name):
        return item.get(name) if isinstance(item.get(name), str) else None

    if text("id") or text("name"):
        return text("id") or text("name")
    if text("column"):
        return f"{text('tier')}, {text('column')}" if text("tier") else text("column")
    if text("covariance"):
        return text("covariance")
    if text("from") and text("to"):
        return f"{text('from')}→{text('to')}"
    return text("row_id") or text("reason")


def plan_key(item: dict) -> str | None:
    """List entries of a plan form by id or name; terms and conditions by how they read."""
    from .plan import Condition, Term

    if isinstance(item.get("id"), str):
        return item["id"]
    if isinstance(item.get("name"), str):
        return item["name"]
    if "form" in item and "variables" in item:
        return Term(item["form"], tuple(item["variables"]), item.get("degree"),
                    tuple(item.get("knots", ()))).label
    if "op" in item and "variable" in item:
        value = item.get("value")
        return Condition(item["variable"], item["op"],
                         tuple(value) if isinstance(value, list) else value).describe()
    if isinstance(item.get("method"), str):
        return item["method"]
    return None


def show(value, limit: int = 60) -> str:
    """A value as a person reads it: plain strings, `none` for null, compact JSON otherwise."""
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return value
    if isinstance(value, (int, float)):
        return repr(value)
    text = json.dumps(value, ensure_ascii=False, sort_keys=True, separators=(", ", ": "))
    return text if len(text) <= limit else text[: limit - 1] + "…"


def differences(old, new, *, path: str = "", key_of: KeyOf = _default_key,
                same=None) -> list[str]:
    """Every difference between two JSON values, one line each: ``PATH: OLD → NEW``,
    ``PATH: + ITEM`` or ``PATH: - ITEM``. List entries are matched by key where each
    entry has a distinct one (``key_of``), by position otherwise. ``same(a, b)`` decides
    whether two leaves are equal (default: exactly; compare passes one that forgives
    rounding)."""
    out: list[str] = []
    _diff(old, new, path, key_of, out, same or _same)
    return out


def _same(a, b) -> bool:
    if isinstance(a, bool) or isinstance(b, bool):
        return a is b
    if isinstance(a, (int, float)) and isinstance(b, (int, float)):
        return a == b
    return type(a) is type(b) and a == b


def _diff(old, new, path: str, key_of: KeyOf, out: list[str], same=_same) -> None:
    if isinstance(old, dict) and isinstance(new, dict):
        for key in sorted(set(old) | set(new)):
            sub = f"{path}.{key}" if path else key
            _diff(old.get(key), new.get(key), sub, key_of, out, same)
        return
    if isinstance(old, list) or isinstance(new, list):
        if isinstance(old, (list, type(None))) and isinstance(new, (list, type(None))):
            _diff_list(old or [], new or [], path, key_of, out, same)  # absent = empty
            return
    if not same(old, new):
        out.append(f"{path}: {show(old)} → {show(new)}")


def _keys(items: list, key_of: KeyOf) -> list[str] | None:
    if not items or not all(isinstance(i, dict) for i in items):
        return None
    keys = [key_of(i) for i in items]
    if any(k is None for k in keys) or len(set(keys)) != len(keys):
        return None
    return keys  # type: ignore[return-value]


def _is_flat(items: Iterable) -> bool:
    return all(not isinstance(i, (dict, list)) for i in items)


def _diff_list(old: list, new: list, path: str, key_of: KeyOf, out: list[str],
               same=_same) -> None:
    old_keys, new_keys = _keys(old, key_of), _keys(new, key_of)
    if (old_keys is not None or not old) and (new_keys is not None or not new) and (old or new):
        old_keys, new_keys = old_keys or [], new_keys or []
        before, after = dict(zip(old_keys, old)), dict(zip(new_keys, new))
        out.extend(f"{path}: - {k}" for k in old_keys if k not in after)
        out.extend(f"{path}: + {k}" for k in new_keys if k not in before)
        common_old = [k for k in old_keys if k in after]
        common_new = [k for k in new_keys if k in before]
        if common_old != common_new:
            out.append(f"{path}: order {', '.join(common_old)} → {', '.join(common_new)}")
        for k in common_new:
            _diff(before[k], after[k], f"{path}[{k}]", key_of, out, same)
        return
    if _is_flat(old) and _is_flat(new):
        if sorted(map(show, old)) == sorted(map(show, new)):
            if [show(v) for v in old] != [show(v) for v in new]:
                out.append(f"{path}: {show(old)} → {show(new)}")
            return
        out.extend(f"{path}: - {show(v)}" for v in old if not any(_same(v, w) for w in new))
        out.extend(f"{path}: + {show(v)}" for v in new if not any(_same(v, w) for w in old))
        return
    for i in range(max(len(old), len(new))):
        sub = f"{path}[{i}]"
        if i >= len(old):
            out.append(f"{sub}: + {show(new[i])}")
        elif i >= len(new):
            out.append(f"{sub}: - {show(old[i])}")
        else:
            _diff(old[i], new[i], sub, key_of, out, same)
