"""Execute notebooks in place and store them without widget state (make notebooks).

The Bench's widget state is large (hundreds of kB of plot data) and only meaningful in a
live kernel, so stored notebooks keep the widget's one-line text form instead.
"""

from __future__ import annotations

import sys
from pathlib import Path

import nbformat
from nbconvert.preprocessors import ExecutePreprocessor


def run(path: Path) -> None:
    notebook = nbformat.read(path, as_version=4)
    ExecutePreprocessor(timeout=600, kernel_name="python3").preprocess(
        notebook, {"metadata": {"path": str(path.parent)}}
    )
    notebook.metadata.pop("widgets", None)
    nbformat.write(notebook, path)
    print(f"{path}: {path.stat().st_size / 1024:.0f} kB")


if __name__ == "__main__":
    targets = [Path(p) for p in sys.argv[1:]] or sorted(Path("notebooks").glob("*.ipynb"))
    for target in targets:
        run(target)
