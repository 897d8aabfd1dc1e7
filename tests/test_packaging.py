"""The schemas and templates are found from a checkout and from an installed wheel.

The wheel is built offline from a copy of the checkout (pip with --no-build-isolation uses the
environment's setuptools), so the shared working tree gets no build/ or egg-info litter.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
import tomllib
import zipfile
from pathlib import Path

import pytest

from compiler import resources

ROOT = Path(__file__).resolve().parents[1]
SHIPPED = ["pyproject.toml", "README.md", "compiler", "schemas", "templates", "reference"]

pytestmark = pytest.mark.packaging


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    source = tmp_path_factory.mktemp("source")
    for name in SHIPPED:
        origin = ROOT / name
        if origin.is_dir():
            shutil.copytree(origin, source / name, ignore=shutil.ignore_patterns("__pycache__"))
        elif origin.exists():
            shutil.copy2(origin, source / name)
    out = tmp_path_factory.mktemp("wheel")
    built = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps",
                            "--no-build-isolation", "--no-index", "-q", "-w", str(out), str(source)],
                           capture_output=True, text=True)
    assert built.returncode == 0, built.stderr
    (built,) = out.glob("prespec-*.whl")
    return built


def test_the_wheel_carries_the_plan_schema(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    assert "compiler/schemas/plan.schema.json" in names


def test_the_wheel_carries_every_template(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    templates = sorted(p.name for p in (ROOT / "templates").iterdir()
                       if p.suffix in (".html", ".css"))
    assert templates, "templates/ holds the report layout"
    assert [t for t in templates if f"compiler/templates/{t}" not in names] == []


def test_pyproject_ships_the_schema_and_template_folders():
    setup = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]
    assert setup["package-dir"] == {"compiler.schemas": "schemas", "compiler.templates": "templates",
                                    "compiler.reference": "reference"}
    assert {"compiler.schemas", "compiler.templates", "compiler.reference"} <= set(
        setup["package-data"])


def test_the_wheel_carries_the_reference_data_qualify_runs_offline(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    shipped = sorted(p.name for p in (ROOT / "reference").iterdir())
    assert "nist_strd_lls.json" in shipped and "README.md" in shipped
    assert [n for n in shipped if f"compiler/reference/{n}" not in names] == []


def test_an_installed_wheel_finds_its_own_schema_and_templates(wheel, tmp_path):
    site = tmp_path / "site"
    zipfile.ZipFile(wheel).extractall(site)  # a pure wheel installs by unpacking
    probe = ("import compiler, compiler.resources as r; "
             "print(compiler.__file__); print(r.schema_path('plan.schema.json')); "
             "print(r.templates_dir()); print(r.reference_path('glm_fits.json'))")
    result = subprocess.run([sys.executable, "-c", probe], cwd=tmp_path, check=True,
                            capture_output=True, text=True, env={"PYTHONPATH": str(site)})
    module, schema, templates, reference = (Path(line) for line in result.stdout.splitlines())
    assert reference == site / "compiler" / "reference" / "glm_fits.json" and reference.is_file()
    assert module.is_relative_to(site)
    assert schema == site / "compiler" / "schemas" / "plan.schema.json" and schema.is_file()
    assert templates == site / "compiler" / "templates" and (templates / "report.html").is_file()


def test_a_checkout_finds_the_top_level_schema_folder():
    assert resources.schema_path("plan.schema.json") == ROOT / "schemas" / "plan.schema.json"
    assert resources.schema_path("plan.schema.json").is_file()


def test_a_checkout_finds_the_top_level_templates_folder():
    assert resources.templates_dir() == ROOT / "templates"
