"""Packaging: the wheel holds the mapped parts inside magvault/, and `init` works in each layout."""

from __future__ import annotations

import os
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q",
                    "-w", str(out), str(ROOT)], check=True, capture_output=True, text=True)
    wheels = list(out.glob("magvault-*.whl"))
    assert len(wheels) == 1
    return wheels[0]


def test_wheel_maps_parts_into_the_package(wheel):
    names = zipfile.ZipFile(wheel).namelist()
    top = {n.split("/")[0] for n in names if not n.split("/")[0].endswith((".dist-info", ".data"))}
    assert top == {"magvault"}, f"unexpected top-level entries: {top}"
    for needed in ("magvault/migrations/env.py", "magvault/migrations/script.py.mako",
                   "magvault/migrations/versions/0001_initial_schema.py", "magvault/webui/__init__.py",
                   "magvault/seed_demo/__init__.py", "magvault/cli.py", "magvault/py.typed"):
        assert needed in names, f"{needed} missing from the wheel"


def test_every_package_folder_is_listed_for_the_wheel(wheel):
    """pyproject lists packages by hand (because of the mapping): a new folder must be added there."""
    names = set(zipfile.ZipFile(wheel).namelist())
    mapping = {"magvault": "magvault", "migrations": "magvault/migrations", "webui": "magvault/webui",
               "seed_demo": "magvault/seed_demo"}
    for src, dest in mapping.items():
        for init in (ROOT / src).rglob("__init__.py"):
            rel = init.relative_to(ROOT / src).as_posix()
            assert f"{dest}/{rel}" in names, f"{src}/{rel} is not packaged; add its package to pyproject.toml"


def _run(args, cwd, env_extra=None):
    env = {k: v for k, v in os.environ.items() if k not in ("MAGVAULT_DB", "PYTHONPATH")}
    env.update(env_extra or {})
    return subprocess.run([sys.executable, *args], cwd=cwd, env=env, capture_output=True, text=True, timeout=300)


def test_init_from_installed_wheel(wheel, tmp_path):
    target = tmp_path / "site"
    subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target", str(target), str(wheel)],
                   check=True, capture_output=True)
    work = tmp_path / "work"
    work.mkdir()
    r = _run(["-c", "import magvault, sys; print(magvault.__file__)"], work, {"PYTHONPATH": str(target)})
    assert r.stdout.strip().startswith(str(target)), r.stderr
    r = _run(["-m", "magvault", "--db", "w.db", "init"], work, {"PYTHONPATH": str(target)})
    assert r.returncode == 0, r.stderr
    assert (work / "w.db").exists()


def test_init_from_the_source_tree(tmp_path):
    db = tmp_path / "src.db"
    r = _run(["-c", "import magvault; print(magvault.__file__)"], ROOT)
    assert r.stdout.strip() == str(ROOT / "magvault" / "__init__.py")
    r = _run(["-m", "magvault", "--db", str(db), "init"], ROOT)
    assert r.returncode == 0, r.stderr
    r = _run(["-m", "magvault", "--db", str(db), "kinds", "--json"], ROOT)
    assert r.returncode == 0 and '"low-t"' in r.stdout


def test_parts_resolve_in_the_source_tree():
    r = _run(["-c", "from magvault.paths import part_dir; print(part_dir('migrations')); print(part_dir('webui'))"],
             ROOT)
    lines = r.stdout.split()
    assert r.returncode == 0, r.stderr
    assert lines[0].endswith("migrations") and lines[1].endswith("webui")
