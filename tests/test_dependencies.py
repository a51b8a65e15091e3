"""Every import of the package is a declared runtime dependency (or guarded optional extra).

A fresh ``pip install .`` has the runtime dependencies of pyproject.toml and what they need,
nothing else: a package that is present here only because an extra or the test tools pulled it
in (click came with dask once, and the demo failed on a fresh machine) must not be imported.
"""

from __future__ import annotations

import ast
import importlib.metadata as md
import re
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "noiselab"


def _dist_name(requirement: str) -> str:
    return re.split(r"[\[<>=!~; ]", requirement.strip(), maxsplit=1)[0].lower().replace("_", "-")


def _project() -> dict:
    with open(ROOT / "pyproject.toml", "rb") as fh:
        return tomllib.load(fh)["project"]


def _runtime_requirements() -> list[str]:
    return list(_project()["dependencies"])


def _extra_requirements() -> list[str]:
    extras = _project().get("optional-dependencies", {})
    return [r for reqs in extras.values() for r in reqs]


def _requested_extras(requirement: str) -> set[str]:
    match = re.search(r"\[([^\]]*)\]", requirement.split(";", 1)[0])
    return {e.strip() for e in match.group(1).split(",")} if match else set()


def _closure(requirements: list[str]) -> set[str]:
    """Distributions a fresh install of ``requirements`` brings (with the extras they name)."""
    seen: set[tuple[str, frozenset[str]]] = set()
    todo = [(_dist_name(r), frozenset(_requested_extras(r))) for r in requirements]
    while todo:
        name, extras = todo.pop()
        if (name, extras) in seen:
            continue
        seen.add((name, extras))
        try:
            reqs = md.requires(name) or []
        except md.PackageNotFoundError:
            continue
        for req in reqs:
            marker = req.split(";", 1)[1] if ";" in req else ""
            wanted = re.findall(r"extra\s*==\s*['\"]([^'\"]+)['\"]", marker)
            if wanted and not set(wanted) & extras:
                continue  # pulled in only by an extra nobody asked for
            if "python_version < " in marker or 'sys_platform == "win32"' in marker:
                continue
            todo.append((_dist_name(req), frozenset(_requested_extras(req))))
    return {name for name, _ in seen}


def _module_to_dists() -> dict[str, set[str]]:
    return {
        mod: {d.lower().replace("_", "-") for d in dists}
        for mod, dists in md.packages_distributions().items()
    }


def _imports(tree: ast.AST) -> list[tuple[str, ast.AST, bool]]:
    """(top-level module, node, guarded by an ``except ImportError``) for every import."""
    found: list[tuple[str, ast.AST, bool]] = []

    def visit(node: ast.AST, guarded: bool) -> None:
        if isinstance(node, ast.Try):
            catches = any(
                isinstance(h.type, ast.Name) and h.type.id in {"ImportError", "ModuleNotFoundError"}
                for h in node.handlers
            )
            for child in node.body:
                visit(child, guarded or catches)
            for child in node.handlers + node.orelse + node.finalbody:
                visit(child, guarded)
            return
        if isinstance(node, ast.Import):
            found.extend((a.name.split(".")[0], node, guarded) for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            found.append((node.module.split(".")[0], node, guarded))
        for child in ast.iter_child_nodes(node):
            visit(child, guarded)

    visit(tree, False)
    return found


def test_every_import_is_declared() -> None:
    runtime = {_dist_name(r) for r in _runtime_requirements()}
    allowed = _closure(_runtime_requirements())
    optional = _closure(_extra_requirements())
    mod_dists = _module_to_dists()
    std = set(sys.stdlib_module_names)
    bad: list[str] = []
    for path in sorted(PACKAGE.rglob("*.py")):
        for top, node, guarded in _imports(ast.parse(path.read_text())):
            if top in std or top == "noiselab" or top == "__future__":
                continue
            dists = mod_dists.get(top, {top})
            where = f"{path.relative_to(ROOT)}:{node.lineno} imports {top}"
            if dists & runtime:
                continue
            if dists & optional and guarded:
                continue  # an optional extra, imported behind 'except ImportError'
            if dists & allowed:
                bad.append(f"{where}: only a dependency of a dependency ({sorted(dists)})")
            else:
                bad.append(f"{where}: not a declared runtime dependency ({sorted(dists)})")
    assert not bad, "\n".join(bad)


# Imports every module with only what a runtime-only install has: the modules of installed
# distributions outside the runtime closure raise ImportError (click, dask, hypothesis, ...).
_BLOCKED_IMPORT = r"""
import importlib, importlib.abc, pkgutil, sys
blocked = set(sys.argv[1].split(","))
class Block(importlib.abc.MetaPathFinder):
    def find_spec(self, name, path=None, target=None):
        if name.split(".")[0] in blocked:
            raise ModuleNotFoundError(f"No module named {name!r} (blocked: not a runtime dep)")
        return None
sys.meta_path.insert(0, Block())
import noiselab
failed = []
for info in pkgutil.walk_packages(noiselab.__path__, "noiselab."):
    if info.name.endswith("__main__"):
        continue
    try:
        importlib.import_module(info.name)
    except ModuleNotFoundError as exc:
        failed.append(f"{info.name}: {exc}")
from noiselab.cli.app import main
for argv in (["--help"], ["demo", "--help"], ["assess", "--help"], ["profile", "--help"]):
    try:
        main(argv)
    except SystemExit as exc:
        if exc.code not in (0, None):
            failed.append(f"noiselab {' '.join(argv)}: exit {exc.code}")
    except ModuleNotFoundError as exc:
        failed.append(f"noiselab {' '.join(argv)}: {exc}")
print("\n".join(failed), file=sys.stderr)
sys.exit(1 if failed else 0)
"""


@pytest.mark.slow
def test_every_module_imports_with_runtime_dependencies_only() -> None:
    allowed = _closure(_runtime_requirements())
    blocked = {
        mod
        for mod, dists in _module_to_dists().items()
        if not (dists & allowed) and mod not in sys.stdlib_module_names and mod != "noiselab"
    }
    assert "click" in blocked or "click" not in _module_to_dists()  # the case that bit us
    proc = subprocess.run(
        [sys.executable, "-c", _BLOCKED_IMPORT, ",".join(sorted(blocked))],
        capture_output=True,
        text=True,
        timeout=300,
        cwd=ROOT,
    )
    assert proc.returncode == 0, proc.stdout + proc.stderr
