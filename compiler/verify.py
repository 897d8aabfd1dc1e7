"""`prespec verify DIR [--data FILE] [--key PUB]`: check a sealed bundle offline.

Intact means: manifest.json is canonical JSON whose ``manifest_sha256`` matches its content;
every file it lists exists with its size and sha256, and no other file is present
(manifest.sig only when the manifest declares a signature); the five files every bundle holds
are listed; no file may be written by others than its owner (the seal makes them 0444); and
the contents agree with one another (compiler.crosscheck: the stamp, the plan's canonical
digest, the lock, results.json's schema, every verdict re-derived from its stored numbers).

A declared signature is checked with the public key the manifest carries, so an edited or
replaced signature is caught without ``--key``; that only shows the bundle is as the holder
of *some* key sealed it, and the output names the key's digest. With ``--key``, the key must
be that one. An unsigned bundle is self-consistent only: whoever can edit it can recompute
every digest.

With ``--data FILE``, the bundled plan.yaml is run again on FILE with the bundle's own stamp
and lock, and the new results.json bytes are compared with the bundled ones; every value
that differs is named by its path in the results (a bounded list).
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

from .canonical import canonical_bytes, differences, sha256_hex
from .files import KIB, MIB, parse_json, read_regular, regular_size
from .problems import Exit, Problem, Stop

MAX_MANIFEST_BYTES = 16 * MIB  # a manifest lists a handful of files
MAX_KEY_BYTES = 64 * KIB  # a PEM public key is about 100 bytes
MAX_SIGNATURE_BYTES = 4 * KIB  # an Ed25519 signature is 64
MAX_DIFFERENCES = 25  # printed
MAX_DIFFERENCES_JSON = 500  # in --json details
# What an auditor reads first when a re-run differs: the inputs, then the verdicts.
READING_ORDER = ("format", "preregistered", "rehearsal", "rehearsal_note", "rehearsal_settings",
                 "plan", "data", "environment", "contract", "decisions", "assumptions",
                 "analyses", "amendments", "lock")


def verify(folder, *, data=None, key=None):
    from .cli import Report

    folder = Path(folder)
    # a key file that is not one is the command line's fault, whatever the bundle
    public = load_public_key(key) if key is not None else None
    problems, lines, manifest = check_bundle(folder, key, public)
    payload = {"bundle": str(folder), "intact": not problems, "rerun": None}
    if problems:
        lines = []  # what agreed is beside the point when something does not
    else:
        lines.insert(0, f"{folder}: intact: {len(manifest['files'])} files match the manifest "
                        f"(manifest sha256 {manifest['manifest_sha256'][:12]}), {manifest['stamp']}")
        lines.append(_kind(manifest).NOT_OFFLINE if _kind(manifest) else NOT_OFFLINE)
        signature = manifest.get("signature")
        lines.append(_signature_words(signature, key) if signature else UNSIGNED)
        payload.update(stamp=manifest["stamp"], manifest_sha256=manifest["manifest_sha256"],
                       signed=None if not signature else {
                           "public_key_sha256": signature["public_key_sha256"],
                           "key_checked": key is not None})
        if data is not None and _kind(manifest):
            raise Stop([Problem(f"{folder}: a qualification bundle has no plan to re-run on "
                                "--data; run prespec qualify again to qualify anew",
                                code="not-a-run")], Exit.PLAN_INVALID)
        if data is not None:
            problems, more = rerun(folder, Path(data))
            lines += more
            payload["rerun"] = "different" if problems else "identical"
    return Report(exit_code=Exit.NOT_INTACT if problems else Exit.OK, lines=lines,
                  payload=payload, problems=tuple(problems))


REQUIRED = ("plan.lock.json", "plan.yaml", "report.html", "report.pdf", "results.json")
SEALED_MODE = 0o444
NOT_OFFLINE = ("  not re-derived offline: the fits' numbers in results.json, and report.html and "
               "report.pdf (sealed by their digests only); give --data FILE to re-run the plan "
               "and compare results.json")
UNSIGNED = ("unsigned: self-consistent only (whoever can edit the bundle can recompute every "
            "digest); sign bundles with run --sign KEY to bind them to a key")


def _signature_words(signature: dict, key) -> str:
    digest = str(signature.get("public_key_sha256"))
    if key is not None:
        return (f"signature checks with {key} (Ed25519, public key sha256 {digest[:12]}…): the "
                "bundle is as the holder of that key sealed it")
    return (f"signed by key {digest[:12]}… (Ed25519; the signature checks with the public key "
            "the manifest carries); give --key PUB to check it is yours: without it, anyone "
            "could have re-signed an edited bundle with a key of their own")


def _fail(message: str, code: str = "not-intact", **details) -> Problem:
    return Problem(message, code=code, details=details)


def check_bundle(folder: Path, key=None, public=None) -> tuple[list[Problem], list[str],
                                                                dict | None]:
    """Every way the bundle differs from its manifest (empty when intact), notes, and the
    manifest as checked (None when it is unreadable or not a manifest), so that what is
    reported is what was checked. ``public``: the Ed25519 public key loaded from the file
    ``key`` (load_public_key)."""
    from .seal import MANIFEST, SIGNATURE, manifest_digest

    if not folder.is_dir():
        return [_fail(f"{folder}: not a bundle folder (it does not exist or is not a "
                      "folder)")], [], None
    try:
        raw = read_regular(folder / MANIFEST, MAX_MANIFEST_BYTES)
    except OSError as exc:
        return [_fail(f"{MANIFEST}: cannot be read: {exc.strerror or exc}",
                      file=MANIFEST)], [], None
    manifest, why = parse_json(raw)
    if why:
        return [_fail(f"{MANIFEST}: unreadable: {why}", file=MANIFEST)], [], None
    malformed = _malformed(manifest)
    if malformed:
        return [_fail(f"{MANIFEST}: not a bundle manifest: {malformed}",
                      file=MANIFEST)], [], None
    listed = {entry["path"]: entry for entry in manifest["files"]}
    problems, notes, owner_writable = [], [], []
    problems += [_fail(f"{name}: a symbolic link", file=name) for name in (MANIFEST, SIGNATURE)
                 if (folder / name).is_symlink()]
    if raw != canonical_bytes(manifest):
        problems.append(_fail(f"{MANIFEST}: its bytes are not the canonical form of its content "
                              "(it was edited)", file=MANIFEST))
    if manifest.get("manifest_sha256") != manifest_digest(manifest):
        problems.append(_fail(f"{MANIFEST}: its content does not match its own digest "
                              "manifest_sha256 (it was edited)", file=MANIFEST))
    for name, entry in sorted(listed.items()):
        path = folder / name
        if path.is_symlink() or not path.is_file():
            said = "a symbolic link" if path.is_symlink() else "missing from the bundle"
            problems.append(_fail(f"{name}: {said}", file=name))
            continue
        try:
            size, sha = _size_and_digest(path, entry["size"])
        except OSError as exc:  # a file not readable, or swapped for a FIFO meanwhile
            problems.append(_fail(f"{name}: cannot be read: {exc.strerror or exc}", file=name))
            continue
        if size != entry.get("size") or sha != entry.get("sha256"):
            shown = f"sha256 {sha[:12]}" if sha else "not hashed"
            problems.append(_fail(f"{name}: does not match the manifest (size {size}, "
                                  f"{shown}; the manifest says size "
                                  f"{entry.get('size')}, sha256 {str(entry.get('sha256'))[:12]})",
                                  file=name))
    kind = _kind(manifest)
    problems += [_fail(f"{name}: missing: every bundle holds it, and the manifest does not "
                       "list it", file=name) for name in (kind.REQUIRED if kind else REQUIRED)
                 if name not in listed]
    signature = manifest.get("signature")
    expected = set(listed) | {MANIFEST} | ({SIGNATURE} if signature else set())
    problems += [_fail(f"{name}: not listed in the manifest ({what})", file=name)
                 for name, what in _entries(folder) if name not in expected]
    problems += _cross_check(manifest, listed)
    if signature and not (folder / SIGNATURE).is_file():
        problems.append(_fail(f"{SIGNATURE}: missing, but the manifest says the bundle is "
                              "signed", file=SIGNATURE))
    elif signature:
        problems += _check_signature(folder, raw, signature, key, public)
    elif key is not None:
        problems.append(_fail(f"{MANIFEST}: the bundle is not signed, but --key was given",
                              file=MANIFEST))
    if not problems:  # the files are the sealed ones: do they agree with one another?
        from .crosscheck import check_contents

        found, notes = (kind.check_contents if kind else check_contents)(folder, manifest)
        problems += found
    modes, owner_writable = _modes(folder, sorted(expected))
    problems += modes
    if owner_writable:
        notes.append(f"  note: {len(owner_writable)} files are writable by their owner "
                     f"({', '.join(owner_writable[:3])}{', …' if len(owner_writable) > 3 else ''}"
                     "), as a copy from version control leaves them; the seal covers their "
                     "bytes, which match")
    return problems, notes, manifest


def _kind(manifest: dict):
    """compiler.qualify_verify for a qualification bundle (its own required files and
    content checks), else None: a run's or rehearsal's bundle."""
    from . import qualify_verify

    return qualify_verify if qualify_verify.is_qualification(manifest) else None


def _modes(folder: Path, names: list[str]) -> tuple[list[Problem], list[str]]:
    """Files others may write (not intact: the seal made them 0444, and anyone could have put
    other bytes there), and files only their owner may write (noted: version control and some
    copies leave files 0644; the bytes are what the digests cover)."""
    import stat

    problems, owner = [], []
    for name in names:
        try:
            status = (folder / name).lstat()
        except OSError:
            continue  # a missing file is reported above
        if not stat.S_ISREG(status.st_mode):
            continue  # links and other entries are reported above
        mode = stat.S_IMODE(status.st_mode)
        if mode & 0o022:
            problems.append(_fail(f"{name}: writable by others (mode {mode:04o}); a sealed "
                                  f"file is read-only ({SEALED_MODE:04o}): restore it with "
                                  f"chmod {SEALED_MODE:o} if its bytes match", file=name))
        elif mode & 0o200:
            owner.append(f"{name} {mode:04o}")
    return problems, owner


def _size_and_digest(path: Path, expected_size: int) -> tuple[int, str]:
    """A bundle file's size and, when the size is the manifest's, its sha256, read a block
    at a time (a file swapped for a huge one is not read into memory)."""
    size = regular_size(path)
    if size != expected_size:
        return size, ""
    digest = hashlib.sha256()
    with open(path, "rb", buffering=0) as handle:
        while block := handle.read(1 << 20):
            digest.update(block)
            size -= len(block)
    return expected_size - size, digest.hexdigest()


def _malformed(manifest) -> str | None:
    """What makes a parsed manifest unusable as one, or None: the checks below read these
    fields by these types (its digest and canonical bytes are checked after)."""
    if not isinstance(manifest, dict):
        return "it is not a JSON object"
    files = manifest.get("files")
    if not isinstance(files, list) or not all(
            isinstance(e, dict) and isinstance(e.get("path"), str) and e["path"]
            and isinstance(e.get("size"), int) and isinstance(e.get("sha256"), str)
            for e in files):
        return "`files` is not a list of {path, size, sha256} entries"
    outside = [e["path"] for e in files if Path(e["path"]).is_absolute()
               or ".." in Path(e["path"]).parts]
    if outside:
        return f"`files` names {outside[0]!r}, outside the bundle folder"
    for part in ("signature", "results", "plan", "data"):
        if manifest.get(part) is not None and not isinstance(manifest[part], dict):
            return f"`{part}` is not an object"
    if not isinstance(manifest.get("stamp"), str):
        return "`stamp` is missing or not text"
    return None


def _entries(folder: Path):
    """(relative path, what it is) of everything in the folder but sub-folders that hold
    something: a sealed bundle holds regular files only, so a link, an empty folder or any
    other kind of entry is named. Links are not followed."""
    unreadable: list[OSError] = []
    for root, folders, files in os.walk(folder, onerror=unreadable.append):
        here = Path(root)
        for name in folders:
            path = here / name
            if path.is_symlink():
                yield path.relative_to(folder).as_posix(), "a symbolic link to a folder"
                continue
            try:
                empty = not any(path.iterdir())
            except OSError as exc:
                yield path.relative_to(folder).as_posix(), \
                    f"an added folder that cannot be read: {exc.strerror or exc}"
                continue
            if empty:
                yield path.relative_to(folder).as_posix(), "an added, empty folder"
        for name in files:
            path = here / name
            what = ("a symbolic link" if path.is_symlink() else
                    "an added file" if path.is_file() else "not a regular file")
            yield path.relative_to(folder).as_posix(), what
    for exc in unreadable:  # the bundle folder itself, or a folder that vanished meanwhile
        if exc.filename and Path(exc.filename) != folder:
            continue  # named above, as a folder that cannot be read
        yield ".", f"the bundle folder cannot be listed: {exc.strerror or exc}"


def _cross_check(manifest: dict, listed: dict) -> list[Problem]:
    from .seal import MANIFEST

    problems = []
    pairs = (("results", "sha256", "results.json"), ("plan", "file_sha256", "plan.yaml"))
    for part, field, name in pairs:
        stated = (manifest.get(part) or {}).get(field)
        if name in listed and stated != listed[name].get("sha256"):
            problems.append(_fail(f"{MANIFEST}: its {part} digest disagrees with its "
                                  f"entry for {name}", file=MANIFEST))
    return problems


def load_public_key(key):
    """The Ed25519 public key in the PEM file ``key``; exit 2 (the command line names a file
    that is not one) otherwise."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    try:
        public = serialization.load_pem_public_key(read_regular(key, MAX_KEY_BYTES))
    except (OSError, ValueError, TypeError) as exc:
        raise Stop([Problem(f"{key}: cannot read the public key: {exc}", code="bad-key")],
                   Exit.PLAN_INVALID) from None
    if not isinstance(public, Ed25519PublicKey):
        raise Stop([Problem(f"{key}: not an Ed25519 public key", code="bad-key")],
                   Exit.PLAN_INVALID)
    return public


def _check_signature(folder: Path, raw: bytes, signature: dict, key, public) -> list:
    """The signature against the public key the manifest declares (so that a signature that
    no longer matches, or another key's, is caught without --key), and with --key, that key
    against the declared one."""
    from cryptography.exceptions import InvalidSignature
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    from .seal import MANIFEST, SIGNATURE, public_key_sha256

    declared = signature.get("public_key_sha256")
    embedded = _declared_key(signature)
    if isinstance(embedded, str):
        if public is None:
            return [_fail(f"{MANIFEST}: its signature declaration {embedded}, so the signature "
                          "cannot be checked from the bundle alone (give --key PUB)",
                          file=MANIFEST)]
        embedded = None  # an older declaration: the given key checks the signature
    try:
        sig = read_regular(folder / SIGNATURE, MAX_SIGNATURE_BYTES)
    except OSError as exc:
        return [_fail(f"{SIGNATURE}: cannot be read: {exc.strerror or exc}", file=SIGNATURE)]
    if embedded is not None:
        try:
            Ed25519PublicKey.from_public_bytes(embedded).verify(sig, raw)
        except (InvalidSignature, ValueError):
            return [_fail(f"{SIGNATURE}: the signature does not check with the public key the "
                          f"manifest declares (sha256 {str(declared)[:12]}…): manifest.json was "
                          "changed after signing, or the signature is another key's",
                          file=SIGNATURE)]
    if public is None:
        return []
    if public_key_sha256(public) != declared:
        return [_fail(f"{SIGNATURE}: the bundle was signed with another key (public key "
                      f"sha256 {str(declared)[:12]}…), not {key} (sha256 "
                      f"{public_key_sha256(public)[:12]}…)", file=SIGNATURE)]
    try:
        public.verify(sig, raw)
    except InvalidSignature:
        return [_fail(f"{SIGNATURE}: the signature does not check with {key}", file=SIGNATURE)]
    return []


def _declared_key(signature: dict):
    """The raw public key the declaration carries, or what is wrong with the declaration."""
    from .seal import SIGNATURE

    if signature.get("algorithm") != "Ed25519" or signature.get("file") != SIGNATURE:
        return f"is not Ed25519 in {SIGNATURE}"
    text, declared = signature.get("public_key"), signature.get("public_key_sha256")
    if not isinstance(text, str):
        return "carries no public key"
    try:
        raw = bytes.fromhex(text)
    except ValueError:
        return "carries a public key that is not hexadecimal"
    if len(raw) != 32 or sha256_hex(raw) != declared:
        return "carries a public key whose sha256 is not the declared public_key_sha256"
    return raw


# ---------------------------------------------------------------------------------------------
# verify --data


def _unusable_results(old) -> str | None:
    """Why a parsed results.json cannot say how the bundle was run, or None: the re-run
    reads these fields by these types."""
    if not isinstance(old, dict):
        return "it is not a JSON object"
    for name in ("preregistered", "rehearsal"):
        if not isinstance(old.get(name), bool):
            return f"`{name}` is missing or not true/false"
    if not isinstance(old.get("rehearsal_note"), (str, type(None))):
        return "`rehearsal_note` is not text"
    settings = old.get("rehearsal_settings")
    if settings is None:
        return "a rehearsal without its `rehearsal_settings`" if old["rehearsal"] else None
    if not isinstance(settings, dict) or settings.get("source") not in ("synthetic",
                                                                          "scrambled"):
        return "`rehearsal_settings` is not a synthetic or scrambled rehearsal's settings"
    wanted = {"seed": (int,), "rows": (int, type(None)), "effect": (int, float, type(None)),
              "scramble": (str, type(None))}
    for name, kinds in wanted.items():
        if not isinstance(settings.get(name), kinds) or isinstance(settings.get(name), bool):
            return f"`rehearsal_settings.{name}` is missing or of the wrong type"
    return None


def rerun(folder: Path, data_path: Path) -> tuple[list[Problem], list[str]]:
    """Run the bundled plan on ``data_path`` as the bundle was run; compare results bytes."""
    from .bundle import rehearsal_table, results_document
    from .lock import read_lock
    from .pipeline import Stamp, analyse, compile_plan
    from .problems import Stop
    from .results import to_bytes

    old_bytes = (folder / "results.json").read_bytes()  # checked against the manifest
    old, why = parse_json(old_bytes)
    why = why or _unusable_results(old)
    if why:
        return [_fail(f"results.json: the bundle cannot be re-run: {why}", code="rerun-failed",
                      file="results.json")], []
    plan_path = folder / "plan.yaml"
    stamp = Stamp(preregistered=old["preregistered"], rehearsal=old["rehearsal"],
                  note=old["rehearsal_note"])
    settings = old.get("rehearsal_settings")
    notes = []
    if settings and settings["source"] == "synthetic":
        notes.append(f"a synthetic rehearsal: its data are made again from seed "
                     f"{settings['seed']}; {data_path} is not read")
    try:  # the bundled plan and lock are the bundle's: their faults are a bundle not intact
        plan = compile_plan(plan_path)
        state = read_lock(folder / "plan.lock.json") if old["preregistered"] else None
        table = rehearsal_table(plan, settings, data_path) if settings else None
        analysed = analyse(plan, data_path, table=table)
    except Stop as stop:
        listed = "".join(f"\n  {p.format()}" for p in stop.problems)
        return [_fail(f"results.json: the bundled plan cannot be re-run on {data_path}:{listed}",
                      code="rerun-failed", file="results.json")], notes
    new = results_document(analysed, stamp, plan_bytes=plan_path.read_bytes(), state=state,
                           settings=settings)
    if to_bytes(new) == old_bytes:
        return [], notes + [f"re-run on {data_path}: results.json is byte-identical"]
    new = json.loads(to_bytes(new))
    changed = []
    for part in [*READING_ORDER, *sorted((set(old) | set(new)) - set(READING_ORDER))]:
        changed += differences(old.get(part), new.get(part), path=part)
    shown = changed[:MAX_DIFFERENCES]
    if len(changed) > len(shown):
        shown.append(f"… and {len(changed) - len(shown)} more")
    message = (f"results.json: a re-run on {data_path} gives different results "
               f"({len(changed)} values differ):" + "".join(f"\n  {c}" for c in shown))
    return [_fail(message, code="results-differ", file="results.json", count=len(changed),
                  differences=changed[:MAX_DIFFERENCES_JSON])], notes
