"""The committed pictures of docs/ are not older than the code that draws them.

``docs/render_docs.py`` (``./tasks.sh docs``) re-renders docs/figures, docs/report_pages and
docs/screenshots and writes ``docs/render_stamp.json``: per target, a SHA-256 of its source
files and of the files it wrote. The first test recomputes both; it fails when the code
changed after the last re-render or a picture was edited by hand. Until the stamp is
committed it is skipped (saying so). The other tests check the mechanism itself on a
throw-away tree, so it is tested whether or not the stamp exists.
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


def _render_docs():
    spec = importlib.util.spec_from_file_location("render_docs", ROOT / "docs" / "render_docs.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


rd = _render_docs()


def test_committed_docs_pictures_match_the_code():
    if not (ROOT / rd.STAMP).exists():
        pytest.skip(f"{rd.STAMP} has not been written yet: run ./tasks.sh docs and commit docs/ with the stamp")
    stale = rd.stale_targets(ROOT)
    assert not stale, ("docs pictures out of date: " + "; ".join(f"{k}: {v}" for k, v in stale.items())
                       + ". Re-render with ./tasks.sh docs (or .venv/bin/python docs/render_docs.py --only "
                       + ",".join(stale) + ") and commit docs/ with docs/render_stamp.json.")


def _tree(tmp_path: Path) -> Path:
    for rel, text in {"workbench/figures/km.py": "draw = 1\n", "workbench/app/main.py": "page = 1\n",
                      "workbench/report/html.py": "page = 2\n", "demo_cohort/study.toml": "[study]\n",
                      "tests/app/test_app_browser.py": "", "docs/render_docs.py": "", "docs/render_demo_figures.py": "",
                      "docs/figures/km.png": "png", "docs/report_pages/page-01.png": "png",
                      "docs/screenshots/1_data.png": "png"}.items():
        (tmp_path / rel).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / rel).write_text(text)
    stamp = {t: rd.stamp_for(tmp_path, t) for t in rd.SOURCES}
    (tmp_path / rd.STAMP).write_text(json.dumps(stamp))
    return tmp_path


def test_stamp_agrees_right_after_a_render(tmp_path):
    assert rd.stale_targets(_tree(tmp_path)) == {}


def test_a_code_change_makes_its_targets_stale(tmp_path):
    root = _tree(tmp_path)
    (root / "workbench/figures/km.py").write_text("draw = 2\n")
    stale = rd.stale_targets(root)
    assert set(stale) == {"figures", "report_pages", "screenshots"}
    assert all("code that draws it changed" in v for v in stale.values())


def test_app_code_touches_only_the_screenshots_and_caches_do_not_count(tmp_path):
    root = _tree(tmp_path)
    (root / "workbench/app/main.py").write_text("page = 2\n")
    (root / "workbench/report/__pycache__").mkdir()
    (root / "workbench/report/__pycache__/html.cpython-311.pyc").write_bytes(b"\0")
    assert set(rd.stale_targets(root)) == {"screenshots"}


def test_a_picture_edited_by_hand_is_caught(tmp_path):
    root = _tree(tmp_path)
    (root / "docs/report_pages/page-01.png").write_text("edited")
    assert rd.stale_targets(root) == {"report_pages": "its files differ from the ones the last re-render wrote"}


def test_a_target_missing_from_the_stamp_is_stale(tmp_path):
    root = _tree(tmp_path)
    stamp = json.loads((root / rd.STAMP).read_text())
    del stamp["screenshots"]
    (root / rd.STAMP).write_text(json.dumps(stamp))
    assert rd.stale_targets(root) == {"screenshots": "never rendered with the stamp"}
