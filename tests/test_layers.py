"""The package's layers: imports point down one list, private names stay home.

An AST check over every module of ``firstorder/`` (imports inside functions
included; those under ``if TYPE_CHECKING:`` are not run, so not counted) holds
the rules of ../shared/DESIGN.md ("Layers") and DEVELOPERS.md:

* every import points down :data:`LAYERS` (a module imports only modules listed
  above it), except the named one-call shortcuts in :data:`SHORTCUTS`;
* a name that starts with ``_`` is imported only inside its own package: a
  private module (``_kernels``) by modules of the package that holds it, a
  private attribute of a module in a subpackage by that subpackage's modules,
  and a private attribute of a top-level module by nobody else;
* every module is in the list, so a new one is placed on purpose;
* no module reaches 600 lines.

The checker is tried on a small synthetic package first, so a rule that stopped
catching anything would fail here too.  A fresh interpreter then shows that
``import firstorder`` loads none of the heavy libraries.
"""

from __future__ import annotations

import ast
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "firstorder"

#: Modules from the bottom up (relative to the package); a package's name comes right
#: after its last module and stands for its ``__init__``.
LAYERS = [
    "_version", "errors", "units", "_html", "_parallel", "_kernels", "_select", "_arrays", "_scratch", "io.atomic",
    "netlist",
    "drive",
    "network.topology", "network.mna", "network.reduce", "network",
    "fixture",
    "configurations",
    "segments",
    "engine",
    "response",
    "settling.tolerance", "settling.table", "settling.stretch", "settling.chain", "settling.settled", "settling.planning", "settling.order",
    "settling",
    "studies.spread", "studies.lot", "studies.summary", "studies._fused", "studies.progress", "studies.run", "studies.budget",
    "studies.adaptive",
    "studies.display", "studies.study", "studies.worst", "studies.sweep", "studies.plan", "studies",
    "cautions",
    "symbolic.names", "symbolic.nodal", "symbolic.steps", "symbolic.derivation", "symbolic",
    "traces.trace", "traces.statistics", "traces.result", "traces.fitting", "traces",
    "io.analysis_format", "io.schema", "io",
    "analysis",
    "cluster",
    "plotting.palette", "plotting.format", "plotting.sampling", "plotting.error_view", "plotting",
    "report.tables", "report.mathml", "report.markdown", "report.figure", "report.html", "report",
    "widgets._loader", "widgets._drive_table", "widgets._generators", "widgets._files", "widgets._fields", "widgets._lot", "widgets._lot_work",
    "widgets._plot", "widgets._session", "widgets._panels", "widgets._study_panels", "widgets._bench", "widgets",
    "cli", "__main__",
    "",  # the package itself: it re-exports everything
]

#: The one-call shortcuts that may import upwards, lazily: (module, function) -> modules.
SHORTCUTS = {
    ("fixture", "Fixture.respond"): {"response"},
    ("fixture", "Fixture.derivation"): {"symbolic", "symbolic.derivation"},
    ("fixture", "Fixture.study"): {"studies", "studies.study"},
    ("fixture", "Fixture.worst_case"): {"studies.worst"},
    ("response", "Response.settling"): {"settling.table"},
    ("settling.planning", "_for_the_lot"): {"studies.plan"},
    ("response", "Response.summary"): {"settling.table"},
    ("response", "Response.cautions"): {"cautions"},
    ("analysis", "Analysis.to_html"): {"report.html"},
    ("analysis", "Analysis.markdown"): {"report.markdown"},
    ("analysis", "Analysis._repr_html_"): {"report.tables"},
    ("studies.study", "Study.__init__"): {"cluster"},
    ("studies.study", "Study.summary"): {"cluster"},
    ("", "__getattr__"): {"widgets"},
}

MAX_LINES = 600


# -- the checker --------------------------------------------------------------------------------
def _modules(root: Path) -> dict[str, Path]:
    """Module name (relative, dotted; a package by its own name, the root as "") to its file."""
    found = {}
    for path in sorted(root.rglob("*.py")):
        parts = list(path.relative_to(root).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        found[".".join(parts)] = path
    return found


def _is_type_checking(test: ast.expr) -> bool:
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING")


def _imports(tree: ast.Module):
    """Every import that runs, with the qualified name of the function it sits in ("" at top)."""
    found = []

    def visit(node: ast.AST, scope: list[str]) -> None:
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.If) and _is_type_checking(child.test):
                for other in child.orelse:
                    visit(other, scope)
                continue
            if isinstance(child, (ast.Import, ast.ImportFrom)):
                found.append((child, ".".join(scope)))
            elif isinstance(child, (ast.FunctionDef, ast.AsyncFunctionDef, ast.ClassDef)):
                visit(child, scope + [child.name])
            else:
                visit(child, scope)

    visit(tree, [])
    return found


def _targets(node: ast.AST, importer: str, is_package: bool, package: str, modules: dict[str, Path]):
    """(target module, names imported from it) for every module an import statement reaches
    inside the package."""
    if isinstance(node, ast.Import):
        for alias in node.names:
            if alias.name == package or alias.name.startswith(package + "."):
                yield alias.name[len(package) + 1:], []
        return
    if node.level == 0:
        if not (node.module == package or (node.module or "").startswith(package + ".")):
            return
        base = (node.module or "")[len(package) + 1:]
    else:
        here = importer.split(".") if importer else []
        if not is_package:
            here = here[:-1]
        if node.level > 1:
            here = here[:len(here) - (node.level - 1)]
        base = ".".join(here + ([node.module] if node.module else []))
    names = [alias.name for alias in node.names]
    submodules = [n for n in names if (f"{base}.{n}" if base else n) in modules]
    for name in submodules:
        yield (f"{base}.{name}" if base else name), []
    attributes = [n for n in names if n not in submodules]
    if attributes or not submodules:
        yield base, attributes


def _private_owner(target: str, name: str | None) -> str | None:
    """The package whose modules may import `name` from `target` (or `target` itself), or None
    when nothing private is involved.  "" is the root package."""
    parts = target.split(".") if target else []
    for i, part in enumerate(parts):
        if part.startswith("_") and not part.startswith("__"):
            return ".".join(parts[:i])
    if name and name.startswith("_") and not name.startswith("__"):
        # An attribute of a module in a subpackage stays in that subpackage; of a
        # top-level module, in that module.
        return ".".join(parts[:-1]) if len(parts) > 1 else target
    return None


def _inside(importer: str, owner: str) -> bool:
    return owner == "" or importer == owner or importer.startswith(owner + ".")


def layer_violations(root: Path, layers: list[str], shortcuts: dict, max_lines: int = MAX_LINES) -> list[str]:
    """Every breach of the rules above in the package at `root`, as readable lines."""
    package = root.name
    modules = _modules(root)
    rank = {name: i for i, name in enumerate(layers)}
    problems = []
    for importer, path in modules.items():
        shown = f"{package}.{importer}" if importer else package
        lines = path.read_text(encoding="utf-8").count("\n")
        if lines >= max_lines:
            problems.append(f"{shown}: {lines} lines; keep modules under {max_lines}")
        if importer not in rank:
            problems.append(f"{shown}: not in the layer list; place it there")
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for node, scope in _imports(tree):
            for target, names in _targets(node, importer, path.name == "__init__.py", package, modules):
                target_shown = f"{package}.{target}" if target else package
                where = f"{shown}:{node.lineno}" + (f" (in {scope})" if scope else "")
                for name in names or [None]:
                    owner = _private_owner(target, name)
                    if owner is not None and not _inside(importer, owner):
                        what = f"{name} from {target_shown}" if name and name.startswith("_") else target_shown
                        problems.append(f"{where}: imports private {what} from outside its package")
                if target == importer or target not in rank:
                    continue
                if rank[target] > rank[importer] and target not in shortcuts.get((importer, scope), set()):
                    problems.append(f"{where}: imports {target_shown}, which is above it in the layer list")
    return problems


# -- the checker on a synthetic package -------------------------------------------------------------
def _write(root: Path, files: dict[str, str]) -> None:
    for name, text in files.items():
        path = root / name
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(textwrap.dedent(text), encoding="utf-8")


class TestChecker:
    LAYERS = ["base", "_private", "sub.inner", "sub.outer", "sub", "top", ""]

    def tree(self, tmp_path: Path, **changes: str) -> Path:
        root = tmp_path / "demo"
        files = {
            "__init__.py": "from .top import Top\n",
            "base.py": "def helper():\n    return 1\n",
            "_private.py": "VALUE = 1\n",
            "sub/__init__.py": "from .outer import run\n",
            "sub/inner.py": "from .._private import VALUE\n\ndef _secret():\n    return VALUE\n",
            "sub/outer.py": "from .inner import _secret\n\ndef run():\n    return _secret()\n",
            "top.py": "from . import base\nfrom .sub import run\n\nclass Top:\n    def go(self):\n        return run()\n",
        }
        files.update(changes)
        _write(root, files)
        return root

    def test_a_clean_tree_passes(self, tmp_path):
        assert layer_violations(self.tree(tmp_path), self.LAYERS, {}) == []

    def test_an_upward_import_fails(self, tmp_path):
        root = self.tree(tmp_path, **{"base.py": "def helper():\n    from .top import Top\n    return Top\n"})
        problems = layer_violations(root, self.LAYERS, {})
        assert problems == ["demo.base:2 (in helper): imports demo.top, which is above it in the layer list"]

    def test_a_named_shortcut_may_import_upwards(self, tmp_path):
        root = self.tree(tmp_path, **{"base.py": "def helper():\n    from .top import Top\n    return Top\n"})
        assert layer_violations(root, self.LAYERS, {("base", "helper"): {"top"}}) == []
        # ... but only from the function it names
        assert layer_violations(root, self.LAYERS, {("base", "other"): {"top"}})

    def test_type_checking_imports_do_not_count(self, tmp_path):
        text = "from typing import TYPE_CHECKING\nif TYPE_CHECKING:\n    from .top import Top\n"
        assert layer_violations(self.tree(tmp_path, **{"base.py": text}), self.LAYERS, {}) == []

    def test_a_private_name_from_another_package_fails(self, tmp_path):
        root = self.tree(tmp_path, **{"top.py": "from .sub.inner import _secret\n"})
        problems = layer_violations(root, self.LAYERS, {})
        assert problems == ["demo.top:1: imports private _secret from demo.sub.inner from outside its package"]

    def test_a_private_module_of_a_subpackage_stays_there(self, tmp_path):
        root = self.tree(tmp_path, **{"sub/_parts.py": "X = 1\n", "top.py": "from .sub import _parts\n"})
        problems = layer_violations(root, ["base", "_private", "sub._parts", *self.LAYERS[2:]], {})
        assert problems == ["demo.top:1: imports private demo.sub._parts from outside its package"]

    def test_a_private_attribute_of_a_top_level_module_stays_there(self, tmp_path):
        root = self.tree(tmp_path, **{"base.py": "def _hidden():\n    return 1\n",
                                      "top.py": "from .base import _hidden\n"})
        problems = layer_violations(root, self.LAYERS, {})
        assert problems == ["demo.top:1: imports private _hidden from demo.base from outside its package"]

    def test_an_absolute_import_counts_too(self, tmp_path):
        root = self.tree(tmp_path, **{"base.py": "import demo.top\n"})
        assert layer_violations(root, self.LAYERS, {}) == [
            "demo.base:1: imports demo.top, which is above it in the layer list"]

    def test_an_unlisted_module_and_a_long_module_fail(self, tmp_path):
        root = self.tree(tmp_path, **{"extra.py": "X = 1\n", "top.py": "X = 1\n" * 700})
        problems = layer_violations(root, self.LAYERS, {})
        assert "demo.extra: not in the layer list; place it there" in problems
        assert "demo.top: 700 lines; keep modules under 600" in problems


# -- the real package ---------------------------------------------------------------------------------
class TestPackage:
    def test_imports_point_down_and_private_names_stay_home(self):
        assert layer_violations(PACKAGE, LAYERS, SHORTCUTS) == []

    def test_every_layer_listed_exists(self):
        modules = _modules(PACKAGE)
        assert [name for name in LAYERS if name not in modules] == []

    @pytest.mark.parametrize("library", ["sympy", "ipywidgets", "bokeh", "scipy", "numba", "pandas", "dask",
                                         "pydantic", "jupyter_bokeh", "tqdm", "distributed"])
    def test_import_firstorder_loads_no_heavy_library(self, library, fresh_import):
        assert library not in fresh_import


@pytest.fixture(scope="module")
def fresh_import() -> set[str]:
    """The modules a fresh interpreter holds after ``import firstorder``."""
    code = "import sys, firstorder; print('\\n'.join(sorted(sys.modules)))"
    # This checkout's package, whichever one the environment has installed.
    environment = dict(os.environ, PYTHONPATH=str(PACKAGE.parent))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, env=environment)
    return {line.split(".")[0] for line in out.stdout.split()}
