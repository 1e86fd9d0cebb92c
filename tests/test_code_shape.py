"""Code shape: no long function, and the lower layers never load the upper ones.

Both rules are the project's own (DEVELOPERS.md: "Lower layers never import higher ones"; issue 17: no function over
about 120 lines), common practice with no outside source.
"""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "coverkit"

#: Most lines a function may span, counted from its ``def`` line to its last line (``end_lineno``), docstring,
#: comments and blank lines included; decorators not counted.
MAX_FUNCTION_LINES = 120

#: Functions allowed to be longer, each with its reason. Keep this list short and shrinking.
ALLOWED_LONG = {
    # A numba-compiled kernel: one loop nest compiled as a whole; splitting it into calls costs speed.
    "polygon_kernels.py::band_distance",
}


def _function_lengths() -> dict[str, int]:
    """Lines spanned by every function and method of the package, keyed ``path/in/package.py::name``."""
    lengths: dict[str, int] = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE).as_posix()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"), filename=str(path))):
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
                key = f"{rel}::{node.name}"
                lengths[key] = max(lengths.get(key, 0), node.end_lineno - node.lineno + 1)
    return lengths


def test_no_function_is_longer_than_the_limit():
    lengths = _function_lengths()
    assert len(lengths) > 500  # the walk found the package (it holds many hundreds of functions)
    too_long = {name: n for name, n in lengths.items() if n > MAX_FUNCTION_LINES and name not in ALLOWED_LONG}
    assert not too_long, f"split these into named helpers (limit {MAX_FUNCTION_LINES} lines): {too_long}"


def test_the_allow_list_names_real_long_functions():
    """An entry that no longer exists or is short again must leave the list, so the list only shrinks."""
    lengths = _function_lengths()
    stale = {name: lengths.get(name) for name in ALLOWED_LONG if lengths.get(name, 0) <= MAX_FUNCTION_LINES}
    assert not stale, f"remove from ALLOWED_LONG (gone or within {MAX_FUNCTION_LINES} lines): {stale}"


@pytest.mark.parametrize("module", ["coverkit.network", "coverkit.travel", "coverkit.coverage", "coverkit.siting"])
def test_lower_layers_do_not_load_the_study_the_cli_or_the_report(module):
    """A fresh interpreter importing a lower layer holds none of the upper ones in ``sys.modules``.

    (``coverkit.study`` not loading the report, and the report not loading the study or the CLI, are held in
    ``test_front_ends_agree.py`` and ``test_errors.py``.)
    """
    upper = ("coverkit.study", "coverkit.cli", "coverkit.report")
    code = (
        f"import sys, {module}\n"
        f"print(' '.join(sorted(m for m in sys.modules if m in {upper!r} or m.startswith(('coverkit.cli.', "
        "'coverkit.report.')))))"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True, cwd=PACKAGE.parent)
    assert proc.stdout.strip() == "", f"importing {module} loads {proc.stdout.strip()}"
