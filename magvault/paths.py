"""Find the parts of magvault that live at the top of the repository.

``migrations/``, ``webui/`` and ``seed_demo/`` are installed inside the package as
``magvault.migrations``, ``magvault.webui`` and ``magvault.seed_demo`` (see
pyproject.toml), so a wheel never adds top-level packages with such generic
names.  In a source checkout (``python -m magvault`` in the repository root, or
pytest with the root conftest) they are plain folders beside ``magvault/``.
:func:`part` and :func:`part_dir` work in all three layouts: installed wheel,
editable install and source tree.
"""

from __future__ import annotations

import importlib
import importlib.util
import sys
from pathlib import Path
from types import ModuleType

PARTS = ("migrations", "webui", "seed_demo")
_SOURCE_ROOT = Path(__file__).resolve().parent.parent


def part(name: str) -> ModuleType:
    """Import ``magvault.<name>`` from wherever this installation keeps it."""
    if name not in PARTS:
        raise ValueError(f"unknown part {name!r}; expected one of {PARTS}")
    qualified = f"magvault.{name}"
    if qualified in sys.modules:
        return sys.modules[qualified]
    try:
        return importlib.import_module(qualified)
    except ModuleNotFoundError as exc:
        if exc.name != qualified:
            raise
    # Source tree: load the sibling folder under its installed name, so its
    # relative imports and its "magvault.<name>.x" submodules resolve the same way.
    folder = _SOURCE_ROOT / name
    init = folder / "__init__.py"
    if not init.is_file():
        raise ModuleNotFoundError(f"magvault part {name!r} not found (looked for {qualified} and {folder})")
    spec = importlib.util.spec_from_file_location(qualified, init, submodule_search_locations=[str(folder)])
    module = importlib.util.module_from_spec(spec)
    sys.modules[qualified] = module
    try:
        spec.loader.exec_module(module)
    except BaseException:
        del sys.modules[qualified]
        raise
    import magvault

    setattr(magvault, name, module)
    return module


def part_dir(name: str) -> Path:
    """The folder holding ``magvault.<name>`` (for Alembic's script location, templates...)."""
    return Path(part(name).__file__).resolve().parent
