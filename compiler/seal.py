"""Seal a bundle: write every artifact and the manifest at once, or write nothing.

The bundle is written into a temporary folder beside the target (``.NAME.tmp-PID-HEX`` in
the same parent, so the rename stays on one file system), every file fsynced and made
read-only (0444), then renamed into place in one step. A crash before the rename leaves no
bundle, only the temporary folder, which the next seal into the same parent removes once the
process that wrote it is gone. The bundle folder itself stays writable, so that ``rm -r``
works without a chmod; an added file is caught by ``prespec verify``, as is a file others may
write (the modes are not in the digests, which copies and version control would break).

An existing target is never overwritten: the run stops with exit 2 before any work.

manifest.json (canonical JSON, compiler.canonical) lists every other file with its size and
sha256, the plan, data and results digests, the environment, the stamp, the run time (the
only wall-clock time in a bundle), an optional signature record, and ``manifest_sha256``:
the digest of the manifest's canonical bytes without that field. With a signing key, the
Ed25519 signature of the exact bytes of manifest.json is written, raw (64 bytes), to
manifest.sig, and the manifest declares it with the public key (``signature_record``); it
checks with ``openssl pkeyutl -verify -pubin -inkey PUB -rawin
-in manifest.json -sigfile manifest.sig``.

Test hook: when ``PRESPEC_TEST_PAUSE_BEFORE_SEAL`` holds a number of seconds, sealing sleeps
that long after the temporary folder is complete and before the rename, so a test can kill
the run at its most delicate moment. It is read here only.
"""

from __future__ import annotations

import contextlib
import os
import re
import secrets
import shutil
import signal
import threading
import time
from pathlib import Path

from .canonical import canonical_bytes, digest, sha256_hex
from .files import KIB, read_regular
from .problems import Exit, Problem, Stop

MANIFEST = "manifest.json"
SIGNATURE = "manifest.sig"
MANIFEST_FORMAT = "prespec-manifest/1"
PAUSE_HOOK = "PRESPEC_TEST_PAUSE_BEFORE_SEAL"
KEY_BYTES = 64 * KIB  # a PEM key file is a few hundred bytes


def refuse_existing(target: Path) -> None:
    if target.exists() or target.is_symlink():
        raise Stop([Problem(f"bundle {target} exists; bundles are never overwritten — "
                            "choose another --out", code="bundle-exists")], Exit.PLAN_INVALID)


def target_folder(out: str | None, default: Path) -> Path:
    """The bundle folder --out names, or ``default`` when it is not given; an empty --out is
    refused rather than taken for the default."""
    if out is None:
        return default
    if not str(out).strip():
        raise Stop([Problem("--out is empty: name the bundle folder, or leave --out out for "
                            f"the default {default}", code="bundle-unwritable")],
                   Exit.PLAN_INVALID)
    return Path(out)


def check_target(target: Path) -> None:
    """Refuse, before any work, a bundle folder that exists or could not be made: the
    nearest folder above it that exists must be a folder this process may write into, and
    the name of the temporary folder the bundle is written in must fit the file system."""
    target = Path(target)
    try:
        refuse_existing(target)
        above = target.parent  # ends at "." or the root, which exist
        while not above.exists() and not above.is_symlink():
            above = above.parent
        longest = os.pathconf(above, "PC_NAME_MAX") if above.is_dir() else 255
    except OSError as exc:  # a name too long for the file system, say
        _unwritable(target, exc.strerror or str(exc))
    if not above.is_dir():
        _unwritable(target, f"{above} is not a folder")
    if not os.access(above, os.W_OK | os.X_OK):
        _unwritable(target, f"the folder {above} is not writable")
    if len(_temporary_name(target).encode()) > longest:
        _unwritable(target, f"its name is longer than this file system allows "
                            f"({longest} bytes, with the temporary folder's suffix)")


def _unwritable(target: Path, why: str):
    raise Stop([Problem(f"bundle {target} cannot be written: {why}", hint="choose another --out",
                        code="bundle-unwritable")], Exit.PLAN_INVALID)


def _temporary_name(target: Path) -> str:
    """The folder the bundle is written in before its one rename: beside the target."""
    return f".{target.name}.tmp-{os.getpid()}-{secrets.token_hex(4)}"


def load_signing_key(path: str | Path):
    """An Ed25519 private key from a PEM file (unencrypted); exit 2 when it is not one."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    try:
        key = serialization.load_pem_private_key(read_regular(path, KEY_BYTES), password=None)
    except (OSError, ValueError, TypeError) as exc:
        raise Stop([Problem(f"{path}: cannot read the signing key: {exc}",
                            hint="give an unencrypted Ed25519 private key in PEM form, e.g. "
                                 "from `openssl genpkey -algorithm ed25519`",
                            code="bad-key")], Exit.PLAN_INVALID) from None
    if not isinstance(key, Ed25519PrivateKey):
        raise Stop([Problem(f"{path}: the signing key is not an Ed25519 key", code="bad-key")],
                   Exit.PLAN_INVALID)
    return key


def public_key_raw(public_key) -> bytes:
    """The 32 bytes of an Ed25519 public key (RFC 8032)."""
    from cryptography.hazmat.primitives import serialization

    return public_key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)


def public_key_sha256(public_key) -> str:
    return sha256_hex(public_key_raw(public_key))


def signature_record(public_key) -> dict:
    """The manifest's signature declaration. It carries the public key itself (hex), so that
    verify can check the signature without ``--key``: a signature that no longer matches, or
    one made by another key, is caught from the bundle alone; ``--key`` then says whose key it
    is. The declaration is covered by manifest_sha256 and by the signature."""
    return {"file": SIGNATURE, "algorithm": "Ed25519",
            "public_key": public_key_raw(public_key).hex(),
            "public_key_sha256": public_key_sha256(public_key)}


def manifest_digest(manifest: dict) -> str:
    return digest({k: v for k, v in manifest.items() if k != "manifest_sha256"})


def seal(target: Path, files: dict[str, bytes], about: dict, *, run_at: str,
         key=None) -> dict:
    """Write ``files`` and their manifest as the bundle ``target``; return the manifest.

    ``about`` holds the manifest's description of the run (plan, data, results digests,
    environment, stamp); it is merged into the manifest as given.
    """
    target = Path(target)
    refuse_existing(target)
    temporary = target.parent / _temporary_name(target)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        _remove_stale(target)
        temporary.mkdir()
    except OSError as exc:  # what check_target could not foresee (/proc, a full disk)
        _unwritable(target, exc.strerror or str(exc))
    try:
        for name, data in sorted(files.items()):
            _write(temporary / name, data)
        manifest = {"format": MANIFEST_FORMAT, **about, "run_at": run_at,
                    "files": [{"path": name, "size": len(data), "sha256": sha256_hex(data)}
                              for name, data in sorted(files.items())],
                    "signature": None if key is None else signature_record(key.public_key())}
        manifest["manifest_sha256"] = manifest_digest(manifest)
        manifest_bytes = canonical_bytes(manifest)
        _write(temporary / MANIFEST, manifest_bytes)
        if key is not None:
            _write(temporary / SIGNATURE, key.sign(manifest_bytes))
        _fsync_folder(temporary)
        pause = os.environ.get(PAUSE_HOOK)
        if pause:
            time.sleep(float(pause))
        with _signals_held() as interrupted:
            refuse_existing(target)  # someone may have written it while we worked
            os.rename(temporary, target)
            _fsync_folder(target.parent)
            if interrupted():  # Ctrl-C during the rename: the run was stopped, so no bundle
                shutil.rmtree(target, ignore_errors=True)
    except OSError as exc:  # a full disk, say: nothing of the bundle is left behind
        shutil.rmtree(temporary, ignore_errors=True)
        _unwritable(target, exc.strerror or str(exc))
    except BaseException:  # an interrupt (KeyboardInterrupt) or a fault: nothing left
        shutil.rmtree(temporary, ignore_errors=True)
        raise
    return manifest


@contextlib.contextmanager
def _signals_held():
    """Hold Ctrl-C and SIGTERM while the bundle is renamed into place; yields a function
    that says whether one arrived meanwhile (it is delivered, as KeyboardInterrupt, on
    leaving). So an interrupted run never leaves a bundle, nor a finished run lose one."""
    held = {signal.SIGINT, signal.SIGTERM}
    if threading.current_thread() is not threading.main_thread():
        yield lambda: False
        return
    before = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield lambda: bool(held & signal.sigpending())
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, before)


def _write(path: Path, data: bytes) -> None:
    with open(path, "xb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())
    os.chmod(path, 0o444)


def _fsync_folder(folder: Path) -> None:
    descriptor = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(descriptor)
    finally:
        os.close(descriptor)


def _remove_stale(target: Path) -> None:
    """Remove the temporary bundle folders, of any bundle name, that runs which died before
    renaming left in the target's parent (their process is gone)."""
    pattern = re.compile(r"\..+\.tmp-(\d+)-[0-9a-f]{8}\Z", re.DOTALL)
    for entry in target.parent.iterdir():
        found = pattern.match(entry.name)
        if found and entry.is_dir() and not _alive(int(found.group(1))):
            shutil.rmtree(entry, ignore_errors=True)


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
