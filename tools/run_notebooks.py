"""Execute notebooks in place and store them without widget state (make notebooks).

The Bench's widget state is large (hundreds of kB of plot data) and only meaningful in a
live kernel, so stored notebooks keep the widget's one-line text form instead.  Likewise
the BokehJS library that a plot cell loads from inline resources (megabytes) is left out
of the stored copy of cells whose output nbval does not check; running the cell loads it.
"""

from __future__ import annotations

import sys
from pathlib import Path

import nbformat
from nbconvert.preprocessors import ExecutePreprocessor


_LARGE = 100_000  # characters
_NOTE = "(plot output not stored: run the cell to draw it)"


def _is_large_script(output) -> bool:
    data = output.get("data", {})
    return any(
        key.startswith("application/vnd.bokehjs") or (key == "application/javascript" and len(str(value)) > _LARGE)
        or (key == "text/html" and len(str(value)) > _LARGE)
        for key, value in data.items()
    )


def _drop_plot_payloads(notebook) -> None:
    for cell in notebook.cells:
        if cell.cell_type != "code" or "nbval-ignore-output" not in cell.metadata.get("tags", []):
            continue
        kept = [output for output in cell.get("outputs", []) if not _is_large_script(output)]
        if len(kept) != len(cell.get("outputs", [])):
            kept.append(nbformat.v4.new_output("display_data", data={"text/plain": _NOTE}))
            cell.outputs = kept


def run(path: Path) -> None:
    notebook = nbformat.read(path, as_version=4)
    ExecutePreprocessor(timeout=600, kernel_name="python3").preprocess(
        notebook, {"metadata": {"path": str(path.parent)}}
    )
    notebook.metadata.pop("widgets", None)
    _drop_plot_payloads(notebook)
    nbformat.write(notebook, path)
    print(f"{path}: {path.stat().st_size / 1024:.0f} kB")


if __name__ == "__main__":
    targets = [Path(p) for p in sys.argv[1:]] or sorted(Path("notebooks").glob("*.ipynb"))
    for target in targets:
        run(target)
