"""The two layers stay apart: core imports no GUI, and core's public API is documented."""

from __future__ import annotations

import importlib
import inspect
import pkgutil
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

import core

REPO = Path(__file__).resolve().parents[1]
GUI_PREFIXES = ("PySide6", "shiboken6", "pyqtgraph", "app")


def core_module_names() -> list[str]:
    """Every module of the core package, found by walking it (new modules are covered)."""
    return ["core"] + sorted(m.name for m in pkgutil.walk_packages(core.__path__, prefix="core."))


def test_core_imports_no_gui_module():
    # A fresh interpreter: in this one pytest-qt may already have loaded Qt.
    script = textwrap.dedent(
        """
        import importlib, pkgutil, sys
        import core
        names = [m.name for m in pkgutil.walk_packages(core.__path__, prefix="core.")]
        for name in names:
            importlib.import_module(name)
        prefixes = %r
        bad = sorted(m for m in sys.modules if m.split(".")[0] in prefixes)
        print(len(names))
        print(",".join(bad))
        """
        % (GUI_PREFIXES,)
    )
    done = subprocess.run([sys.executable, "-c", script], cwd=REPO, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    count, _, bad = done.stdout.partition("\n")
    assert int(count) >= 1
    assert bad.strip() == "", f"core pulled in GUI modules: {bad.strip()}"


def test_import_contracts_hold():
    exe = shutil.which("lint-imports")
    if exe is None:
        pytest.skip("lint-imports is not installed (pip install -e '.[test]' brings it)")
    done = subprocess.run([exe], cwd=REPO, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout + done.stderr


def _public_members():
    for name in core_module_names():
        module = importlib.import_module(name)
        for attr, obj in vars(module).items():
            if attr.startswith("_") or not (inspect.isfunction(obj) or inspect.isclass(obj)):
                continue
            if getattr(obj, "__module__", None) != name:
                continue  # imported from elsewhere; checked where it is defined
            yield f"{name}.{attr}", obj


@pytest.mark.parametrize("qualname,obj", list(_public_members()), ids=lambda v: v if isinstance(v, str) else "")
def test_public_core_api_is_documented(qualname, obj):
    doc = (obj.__doc__ or "").strip()
    # A dataclass without a docstring gets its signature as __doc__: that is not documentation.
    generated = inspect.isclass(obj) and doc.startswith(f"{obj.__name__}(")
    assert doc and not generated, f"{qualname} has no docstring"
