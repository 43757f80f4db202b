"""Tests for firstorder.report.figure: a report needs bokeh, never ipywidgets."""

from __future__ import annotations

import ast
from pathlib import Path

import firstorder as fo

PACKAGE = Path(fo.__file__).parent


def _libraries(path: Path) -> set[str]:
    """Top-level names of the libraries a module imports (anywhere in it)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = {alias.name.split(".")[0] for node in ast.walk(tree) if isinstance(node, ast.Import)
             for alias in node.names}
    found |= {node.module.split(".")[0] for node in ast.walk(tree)
              if isinstance(node, ast.ImportFrom) and node.module and node.level == 0}
    return found


class TestImports:
    def test_report_figure_imports_bokeh_but_not_ipywidgets(self):
        # Reports need bokeh, not a notebook: the figure module stays free of ipywidgets.
        imported = _libraries(PACKAGE / "report" / "figure.py")
        assert "bokeh" in imported and "ipywidgets" not in imported

    def test_only_the_figure_and_the_bench_import_bokeh_and_only_the_bench_ipywidgets(self):
        for path in PACKAGE.rglob("*.py"):
            where = path.relative_to(PACKAGE).as_posix()
            imported = _libraries(path)
            if "bokeh" in imported or "jupyter_bokeh" in imported:
                assert where.startswith("widgets/") or where == "report/figure.py", where
            if "ipywidgets" in imported or "traitlets" in imported:
                assert where.startswith("widgets/"), where
