"""A demo study in a temporary folder, for the run, verify and kill tests.

The plan is plans/dusk-sleep.yaml, the data come from plans/make_demo_data.py (seeded, so
the same bytes every time). ``quick_render`` stands in for the report where a test is about
the bundle's orchestration rather than its report; the determinism and report tests use the
real one.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

from compiler.canonical import canonical_bytes, sha256_hex

ROOT = Path(__file__).resolve().parent.parent
DEMO_PLAN = ROOT / "plans" / "dusk-sleep.yaml"
MAKE_DATA = ROOT / "plans" / "make_demo_data.py"
ROWS = 240


def study(folder: Path) -> tuple[Path, Path]:
    """Copy the demo plan into ``folder`` and write its data; return (plan, data)."""
    folder.mkdir(parents=True, exist_ok=True)
    plan = folder / "dusk-sleep.yaml"
    shutil.copyfile(DEMO_PLAN, plan)
    data = folder / "dusk-sleep.csv"
    subprocess.run([sys.executable, str(MAKE_DATA), str(data), "--rows", str(ROWS)],
                   check=True, capture_output=True)
    return plan, data


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, old
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def quick_render(document: dict, results_bytes: bytes, fits, epoch: int,
                 renderer=None) -> tuple[bytes, bytes]:
    """A deterministic stand-in for report.html and report.pdf."""
    html = canonical_bytes({"report of": sha256_hex(results_bytes), "epoch": epoch})
    return html, b"%PDF-stand-in " + html


def files_of(bundle: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(bundle.iterdir())}


# ---------------------------------------------------------------------------------------------
# Real bundles, and what a forger without a private key can do to them


def sealed_bundle(folder: Path, *, kind: str = "unlocked", sign: Path | None = None) -> Path:
    """A real bundle of the demo study, made through the command line with the quick report.

    ``kind``: "unlocked" (run --unlocked), "locked" (frozen, then run) or "rehearsal"
    (synthetic data); ``sign``: a PEM private key to sign the manifest with.
    """
    import pytest

    from compiler import bundle as bundle_module
    from compiler.cli import main

    plan, data = study(folder / "study")
    out = folder / "bundle"
    if kind == "rehearsal":
        argv = ["rehearse", str(plan), "--rows", "300", "--seed", "3", "--out", str(out)]
    else:
        if kind == "locked":
            assert main(["freeze", str(plan)]) == 0
        argv = ["run", str(plan), "--data", str(data), "--out", str(out)]
        argv += ["--unlocked"] if kind == "unlocked" else []
        argv += ["--sign", str(sign)] if sign is not None else []
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(bundle_module, "render", quick_render)
        assert main(argv) == 0
    return out


def key_pair(folder: Path, name: str = "key"):
    """A new Ed25519 key: (the private key, its PEM file, the public key's PEM file)."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    key = Ed25519PrivateKey.generate()
    private, public = folder / f"{name}.pem", folder / f"{name}.pub"
    private.write_bytes(key.private_bytes(serialization.Encoding.PEM,
                                          serialization.PrivateFormat.PKCS8,
                                          serialization.NoEncryption()))
    public.write_bytes(key.public_key().public_bytes(
        serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo))
    return key, private, public


def copy_of(bundle: Path, folder: Path) -> Path:
    """A copy of ``bundle`` (modes kept) that a test may tamper with."""
    target = folder / "copy"
    shutil.copytree(bundle, target)
    return target


def rewrite(path: Path, data: bytes) -> None:
    path.chmod(0o644)
    path.write_bytes(data)


def edit_json(path: Path, change) -> None:
    """Parse the JSON file ``path``, let ``change(document)`` edit it, write it canonically."""
    import json

    document = json.loads(path.read_bytes())
    change(document)
    rewrite(path, canonical_bytes(document))


def reseal(bundle: Path, change=None, *, sign_with=None) -> None:
    """Recompute every digest of the manifest as a forger would: each listed file's size and
    sha256 (entries of removed files dropped), the results and plan file digests, then
    ``change(manifest)``, then manifest_sha256; ``sign_with``: a private key to sign with."""
    import json

    from compiler.seal import manifest_digest

    path = bundle / "manifest.json"
    manifest = json.loads(path.read_bytes())
    files = {p.name: p.read_bytes() for p in bundle.iterdir() if p.is_file()}
    manifest["files"] = [{"path": e["path"], "size": len(files[e["path"]]),
                          "sha256": sha256_hex(files[e["path"]])}
                         for e in manifest["files"] if e["path"] in files]
    if "results.json" in files:
        manifest["results"]["sha256"] = sha256_hex(files["results.json"])
    if "plan.yaml" in files:
        manifest["plan"]["file_sha256"] = sha256_hex(files["plan.yaml"])
    if change is not None:
        change(manifest)
    manifest["manifest_sha256"] = manifest_digest(manifest)
    rewrite(path, canonical_bytes(manifest))
    if sign_with is not None:
        rewrite(bundle / "manifest.sig", sign_with.sign(path.read_bytes()))
