"""Freeze a plan by its canonical digest, amend it with a reason, and check a run against it.

The lock is ``PLAN.lock.json`` beside the plan (``plans/x.yaml`` → ``plans/x.yaml.lock.json``):

    format          "prespec-lock/1"
    plan            {file, sha256, file_sha256, language}: the plan as it stands now
    canonical_plan  the canonical plan form (compiler.canonical), so a run can say what changed
    freeze          {sha256, file_sha256, language, tool, time}: the first freeze
    amendments      [{previous, new, reason, outcome_data_seen, time, file_sha256, tool,
                     digest_of_previous_entry}]
    head            the digest of the last amendment (of the freeze record before any)

The amendment log is a hash chain: each entry carries the digest (sha256 of the canonical
bytes) of the entry before it, the first entry the digest of the freeze record, so editing,
reordering or removing an entry breaks the chain, and ``head`` covers the last entry.
``outcome_data_seen`` is the analyst's statement, required by ``amend``, whether outcome data
had been seen (unblinded) when the plan was changed; entries written before it was recorded
lack it and read as "not stated" (None), and the chain checks them as they are.
(Without a secret nothing stops a forger who recomputes every digest; the chain catches
edits by hand, and each bundle keeps the lock's digest as it was run.) The lock is written indented for people
to read in review; only its parsed content counts.
"""

from __future__ import annotations

import contextlib
import json
import os
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

from . import __version__
from .canonical import canonical_bytes, differences, digest, plan_digest, plan_form, plan_key, sha256_hex
from .files import MIB, read_regular
from .load import plan_bytes
from .problems import Exit, Problem, Stop

LOCK_FORMAT = "prespec-lock/1"
TOOL = f"prespec {__version__}"
MAX_LOCK_BYTES = 64 * MIB  # the canonical plan (a plan is at most 1 MiB) and its amendments


@dataclass(frozen=True)
class LockState:
    """A lock read and checked: its bytes' digest and what a run records from it."""

    path: Path
    sha256: str  # of the lock file's bytes
    document: dict
    data: bytes = b""  # the lock file's bytes, copied into the bundle as they were checked

    @property
    def frozen_at(self) -> str:
        return self.document["freeze"]["time"]

    @property
    def amended_at(self) -> str | None:
        log = self.document["amendments"]
        return log[-1]["time"] if log else None

    @property
    def plan_sha256(self) -> str:
        return self.document["plan"]["sha256"]

    @property
    def frozen_file_sha256(self) -> str | None:
        """sha256 of the plan file's bytes when it was frozen or last amended."""
        return self.document["plan"].get("file_sha256")

    @property
    def amendments(self) -> list[dict]:
        """The log as a run reports it; ``outcome_data_seen`` None where it was not stated."""
        return [{**{k: e[k] for k in ("previous", "new", "reason", "time")},
                 "outcome_data_seen": e.get("outcome_data_seen")}
                for e in self.document["amendments"]]


def lock_path(plan_path: str | Path) -> Path:
    return Path(f"{plan_path}.lock.json")


def now_utc() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def epoch_of(time_text: str) -> int:
    """Seconds since 1970 of an ISO 8601 UTC time as the lock writes it."""
    moment = datetime.strptime(time_text, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=timezone.utc)
    return int(moment.timestamp())


# ---------------------------------------------------------------------------------------------
# Commands


def freeze(plan_path: str | Path):
    """`prespec freeze PLAN`: write the lock; refuse (exit 4) when a lock holds another plan."""
    from .cli import Report
    from .pipeline import compile_plan

    plan = compile_plan(plan_path)
    target = lock_path(plan_path)
    sha = plan_digest(plan)
    if target.exists():
        state = read_lock(target)
        if state.plan_sha256 != sha:
            raise Stop([_changed_problem(plan_path, state, plan,
                                         "a lock already exists and holds a different plan",
                                         hint=f"to record the change: prespec amend {plan_path} "
                                              "--reason TEXT")], Exit.LOCK)
        file_sha = sha256_hex(Path(plan_path).read_bytes())
        layout = state.frozen_file_sha256 not in (None, file_sha)
        return Report(lines=[f"{plan_path}: already frozen at {state.frozen_at} "
                             f"(plan sha256 {sha[:12]}); {target} is unchanged"
                             + ("; the file differs from the frozen text in comments or layout "
                                "only" if layout else "")],
                      payload={**_payload(target, state.document, already=True),
                               "comments_or_layout_differ": layout})
    file_sha = sha256_hex(plan_bytes(plan_path))
    record = {"sha256": sha, "file_sha256": file_sha, "language": plan.language,
              "tool": TOOL, "time": now_utc()}
    document = {"format": LOCK_FORMAT, "freeze": record, "amendments": [], "head": digest(record),
                "plan": _plan_entry(plan_path, plan, sha, file_sha),
                "canonical_plan": plan_form(plan)}
    _write(target, document)
    return Report(lines=[f"{plan_path}: frozen at {record['time']}: plan sha256 {sha[:12]} "
                         f"→ {target}"], payload=_payload(target, document, already=False))


def amend(plan_path: str | Path, reason: str, *, outcome_data_seen: bool | None = None):
    """`prespec amend PLAN --reason TEXT --before-unblinding|--after-unblinding`: re-freeze a
    changed plan, chaining the log. Whether outcome data had been seen must be stated."""
    from .cli import Report
    from .pipeline import compile_plan

    if outcome_data_seen is None:
        raise Stop([Problem("the amendment must state whether outcome data had been seen: "
                            "--before-unblinding or --after-unblinding",
                            code="unblinding-not-stated",
                            hint="--after-unblinding when anyone who changed the plan had seen "
                                 "outcome data, or results computed from them; every later "
                                 "report is then stamped AMENDED AFTER UNBLINDING on each page")],
                   Exit.PLAN_INVALID)
    plan = compile_plan(plan_path)
    target = lock_path(plan_path)
    if not target.exists():
        raise Stop([Problem(f"{plan_path} has no lock to amend ({target} does not exist)",
                            hint=f"freeze it first: prespec freeze {plan_path}",
                            code="no-lock")], Exit.LOCK)
    if not reason.strip():
        raise Stop([Problem("the amendment needs a reason (--reason TEXT)", code="no-reason")],
                   Exit.PLAN_INVALID)
    state = read_lock(target)
    sha = plan_digest(plan)
    if sha == state.plan_sha256:
        raise Stop([Problem(f"{plan_path} is unchanged since it was frozen (plan sha256 "
                            f"{sha[:12]}): there is nothing to amend", code="unchanged")],
                   Exit.LOCK)
    changes = differences(state.document["canonical_plan"], plan_form(plan), key_of=plan_key)
    document = state.document
    log = document["amendments"]
    previous_entry = log[-1] if log else document["freeze"]
    file_sha = sha256_hex(plan_bytes(plan_path))
    entry = {"previous": state.plan_sha256, "new": sha, "reason": reason.strip(),
             "outcome_data_seen": bool(outcome_data_seen), "time": now_utc(),
             "file_sha256": file_sha, "tool": TOOL,
             "digest_of_previous_entry": digest(previous_entry)}
    document = {**document, "amendments": [*log, entry], "head": digest(entry),
                "plan": _plan_entry(plan_path, plan, sha, file_sha),
                "canonical_plan": plan_form(plan)}
    _write(target, document)
    seen = "after unblinding" if outcome_data_seen else "before unblinding"
    lines = [f"{plan_path}: amended at {entry['time']} ({seen}): plan sha256 "
             f"{state.plan_sha256[:12]} → {sha[:12]} (amendment {len(log) + 1}) → {target}"]
    lines += [f"  {change}" for change in changes]
    return Report(lines=lines, payload={**_payload(target, document, already=False),
                                        "changes": changes, "reason": entry["reason"],
                                        "outcome_data_seen": entry["outcome_data_seen"]})


# ---------------------------------------------------------------------------------------------
# Checking


def require_match(plan, plan_path: str | Path) -> LockState:
    """The lock of ``plan_path`` when it exists, is intact and holds ``plan``; else exit 4."""
    target = lock_path(plan_path)
    if not target.exists():
        raise Stop([Problem(f"{plan_path} is not frozen ({target} does not exist)",
                            hint=f"freeze the plan before unblinding: prespec freeze {plan_path}; "
                                 "or run --unlocked (the bundle is stamped NOT PRE-REGISTERED)",
                            code="no-lock")], Exit.LOCK)
    state = read_lock(target)
    if state.plan_sha256 != plan_digest(plan):
        raise Stop([_changed_problem(plan_path, state, plan,
                                     "the plan has changed since it was frozen")], Exit.LOCK)
    return state


def read_lock(target: str | Path) -> LockState:
    """Read a lock and check it hangs together: format, plan digest, the amendment chain."""
    target = Path(target)
    try:
        data = read_regular(target, MAX_LOCK_BYTES)
    except OSError as exc:  # a folder where the lock should be, a lock not readable
        raise _broken(target, f"it cannot be read ({exc.strerror or exc})") from None
    try:
        document = json.loads(data.decode("utf-8"), parse_constant=_no_constant)
    except (UnicodeDecodeError, ValueError) as exc:  # JSONDecodeError is a ValueError
        raise _broken(target, f"it is not valid JSON ({exc})") from None
    except RecursionError:
        raise _broken(target, "it is not a prespec lock (nested too deeply)") from None
    problems = check_lock(document)
    if problems:
        raise Stop([Problem(f"{target}: {p}", code="lock-broken",
                            hint="a lock is changed only by `prespec freeze` and `prespec amend`; "
                                 "restore it from version control") for p in problems], Exit.LOCK)
    return LockState(target, sha256_hex(data), document, data)


def _no_constant(name: str):
    """json's NaN, Infinity and -Infinity, which no lock holds (canonical JSON refuses them)."""
    raise ValueError(f"{name} is not a JSON number")


def check_lock(document) -> list[str]:
    """Every inconsistency of a parsed lock, in plain words (empty when it is intact)."""
    if not isinstance(document, dict) or document.get("format") != LOCK_FORMAT:
        return [f"it is not a prespec lock (format {LOCK_FORMAT!r} expected)"]
    try:
        freeze_record, log = document["freeze"], document["amendments"]
        head = document["plan"]["sha256"]
        form = document["canonical_plan"]
        expected = freeze_record["sha256"]
        problems = []
        previous_entry = freeze_record
        for number, entry in enumerate(log, start=1):
            name = f"amendment {number} ({entry.get('time')}, reason {entry.get('reason')!r})"
            if entry.get("digest_of_previous_entry") != digest(previous_entry):
                before = "the freeze record" if number == 1 else f"amendment {number - 1}"
                problems.append(f"the amendment chain is broken at {name}: its "
                                f"digest_of_previous_entry does not match {before}")
            if not isinstance(entry.get("outcome_data_seen", False), bool):
                problems.append(f"{name}: outcome_data_seen must be true or false, not "
                                f"{entry.get('outcome_data_seen')!r}")
            if entry.get("previous") != expected:
                problems.append(f"the amendment chain is broken at {name}: it amends plan "
                                f"{str(entry.get('previous'))[:12]}, but the plan before it "
                                f"was {expected[:12]}")
            expected = entry["new"]
            previous_entry = entry
        if document["head"] != digest(previous_entry):
            last = f"amendment {len(log)}" if log else "the freeze record"
            problems.append(f"the amendment chain is broken at {last}: it does not match the "
                            "lock's head digest (it was edited)")
        if head != expected:
            problems.append(f"the lock holds plan {head[:12]}, but its log ends at {expected[:12]}"
                            " (an amendment is missing)")
        if digest(form) != head:
            problems.append("its canonical_plan does not match its plan sha256 (it was edited)")
        problems += _bad_times(freeze_record, log)
        return problems
    except (KeyError, TypeError, AttributeError) as exc:
        return [f"it lacks a part every lock has ({exc})"]


def _bad_times(freeze_record: dict, log: list) -> list[str]:
    """The freeze and amendment times that are not UTC times as the lock writes them: the
    report's dates are made from them, so a forged one is a broken lock, not a crash."""
    problems = []
    for name, record in [("the freeze record", freeze_record),
                         *((f"amendment {n}", e) for n, e in enumerate(log, start=1))]:
        moment = record.get("time")
        try:
            epoch_of(moment)
        except (TypeError, ValueError, OverflowError):
            problems.append(f"{name}'s time {json.dumps(moment)[:40]} is not a UTC time "
                            "written as YYYY-MM-DDTHH:MM:SSZ")
    return problems


def _changed_problem(plan_path, state: LockState, plan, headline: str,
                     hint: str | None = None) -> Problem:
    changes = differences(state.document["canonical_plan"], plan_form(plan), key_of=plan_key)
    when = state.amended_at or state.frozen_at
    listed = "".join(f"\n  {c}" for c in changes) or "\n  (no difference could be named)"
    return Problem(f"{plan_path}: {headline} (lock {state.path}, {when}):{listed}",
                   hint=hint or f"if the change is intended, record it: prespec amend "
                                f"{plan_path} --reason TEXT; or run --unlocked (the bundle is "
                                "stamped NOT PRE-REGISTERED)",
                   code="plan-changed", details={"changes": changes})


def _broken(target: Path, why: str) -> Stop:
    return Stop([Problem(f"{target}: the lock is broken: {why}", code="lock-broken")], Exit.LOCK)


def _plan_entry(plan_path, plan, sha: str, file_sha: str) -> dict:
    return {"file": Path(plan_path).name, "sha256": sha, "file_sha256": file_sha,
            "language": plan.language}


def _payload(target: Path, document: dict, *, already: bool) -> dict:
    return {"lock": str(target), "plan_sha256": document["plan"]["sha256"],
            "frozen_at": document["freeze"]["time"], "amendments": len(document["amendments"]),
            "already_frozen": already}


def _write(target: Path, document: dict) -> None:
    """Write beside the target and rename, so a crash never leaves half a lock."""
    canonical_bytes(document)  # refuses NaN before anything is written
    text = json.dumps(document, indent=2, sort_keys=True, ensure_ascii=False) + "\n"
    temporary = target.with_name(f".{target.name}.tmp-{os.getpid()}")
    try:
        with open(temporary, "w", encoding="utf-8") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temporary, target)
    except OSError as exc:  # a folder not writable, a full disk: say so, leave nothing
        with contextlib.suppress(OSError):
            os.unlink(temporary)
        raise Stop([Problem(f"{target}: cannot write the lock: {exc.strerror or exc}",
                            hint="freeze the plan in a folder you may write to",
                            code="lock-unwritable")], Exit.PLAN_INVALID) from None
