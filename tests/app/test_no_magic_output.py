"""No page script of the app shows a bare expression by accident.

Streamlit "magic" writes every bare expression of a page script to the page (a string under
a constant, a variable on its own line). A string written as a constant's docstring in
``app/main.py`` was shown on every view. Checked with Streamlit's own rewriting
(``streamlit.runtime.scriptrunner.magic.add_magic``): no page script may get a magic write.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
from streamlit.runtime.scriptrunner.magic import add_magic

APP = Path(__file__).resolve().parents[2] / "workbench" / "app"
SCRIPTS = [APP / "main.py", *sorted((APP / "views").glob("*.py"))]


def _magic_writes(path: Path) -> list[int]:
    tree = add_magic(path.read_text(encoding="utf-8"), str(path))
    return [n.lineno for n in ast.walk(tree) if isinstance(n, ast.Call) and isinstance(n.func, ast.Attribute)
            and n.func.attr == "transparent_write"]


@pytest.mark.parametrize("script", SCRIPTS, ids=lambda p: p.name)
def test_page_script_has_no_magic_write(script):
    assert _magic_writes(script) == [], f"{script.name}: bare expressions Streamlit would show on the page"


def test_the_check_sees_a_bare_string(tmp_path):
    page = tmp_path / "page.py"
    page.write_text('"""Docstring: not shown."""\nX = 1\n"""Shown on the page."""\n', encoding="utf-8")
    assert _magic_writes(page) == [3]
