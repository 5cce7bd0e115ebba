"""Re-render the committed pictures of docs/ from the current code, and stamp them.

Run from the repository root (or ``./tasks.sh docs``):

    .venv/bin/python docs/render_docs.py [--replicates 20] [--only figures,report_pages,screenshots]

* ``docs/figures/``: every standard figure of the demo study (``render_demo_figures.py``);
* ``docs/report_pages/``: the demo report printed to PDF by headless Chromium and cut into
  pages with ``pdftoppm -r 80`` (Debian package poppler-utils);
* ``docs/screenshots/``: the three browser test files run with
  ``WORKBENCH_SCREENSHOTS=docs/screenshots`` (Playwright and Chromium, several minutes).

The demo study runs once, with ``--replicates`` bootstrap replicates (few: the pictures
show the layout, not final numbers). Afterwards ``docs/render_stamp.json`` records, for
each target, a SHA-256 of the source files that draw it and of the files written.
``tests/unit/test_docs_stamp.py`` recomputes both and fails when the code changed after the
last re-render (or a picture was changed by hand); re-run this command and commit the
pictures with the stamp.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
STAMP = "docs/render_stamp.json"

SOURCES = {
    # figures and report pages show the demo's numbers, so every module that computes them
    # counts, not only the drawing code (a model change altered the figures before); the app
    # and the command line do not draw them. Paths starting with "!" are left out.
    "figures": ("workbench", "!workbench/app", "!workbench/cli.py", "!workbench/cli_console.py", "demo_cohort",
                "docs/render_demo_figures.py", "docs/render_docs.py"),
    "report_pages": ("workbench", "!workbench/app", "!workbench/cli.py", "!workbench/cli_console.py", "demo_cohort",
                     "docs/render_docs.py"),
    # screenshots: the app's own code, the figures it shows and the browser tests that take them
    "screenshots": ("workbench/app", "workbench/figures", "tests/app/test_app_browser.py",
                    "tests/app/test_app_own_study_browser.py", "tests/app/test_app_competing_browser.py",
                    "tests/app/public_data.py", "demo_cohort"),
}
"""Source paths (folders are walked) whose content each target depends on, relative to the root."""

OUTPUTS = {"figures": "docs/figures", "report_pages": "docs/report_pages", "screenshots": "docs/screenshots"}
SUFFIXES = (".py", ".j2", ".toml", ".csv", ".json", ".md", ".txt")


def _files(root: Path, paths, suffixes=SUFFIXES) -> list[Path]:
    out = []
    skip = [root / rel[1:] for rel in paths if rel.startswith("!")]
    for rel in (r for r in paths if not r.startswith("!")):
        p = root / rel
        if p.is_file():
            out.append(p)
        elif p.is_dir():
            out += [f for f in p.rglob("*") if f.is_file() and "__pycache__" not in f.parts
                    and (suffixes is None or f.suffix in suffixes)]
    return sorted(f for f in set(out) if not any(f == x or x in f.parents for x in skip))


def digest(root: Path, paths, suffixes=SUFFIXES) -> str:
    """SHA-256 over the relative path and bytes of every file under ``paths`` (sorted)."""
    h = hashlib.sha256()
    for f in _files(root, paths, suffixes):
        h.update(f.relative_to(root).as_posix().encode() + b"\0")
        h.update(f.read_bytes().replace(b"\r\n", b"\n") if f.suffix != ".png" else f.read_bytes())
        h.update(b"\0")
    return h.hexdigest()


def stamp_for(root: Path, target: str) -> dict:
    return {"sources": digest(root, SOURCES[target]), "outputs": digest(root, (OUTPUTS[target],), None)}


def stale_targets(root: Path) -> dict[str, str]:
    """Target -> why it is out of date against ``docs/render_stamp.json`` (empty when all agree)."""
    stamp = json.loads((root / STAMP).read_text())
    out = {}
    for target in SOURCES:
        rec = stamp.get(target)
        if rec is None:
            out[target] = "never rendered with the stamp"
            continue
        now = stamp_for(root, target)
        if now["sources"] != rec["sources"]:
            out[target] = "the code that draws it changed after the last re-render"
        elif now["outputs"] != rec["outputs"]:
            out[target] = "its files differ from the ones the last re-render wrote"
    return out


def _report_pages(result, out: Path) -> list[Path]:
    from workbench.report.html import write_report

    if shutil.which("pdftoppm") is None:
        raise SystemExit("pdftoppm is missing: install poppler-utils (apt-get install poppler-utils).")
    with tempfile.TemporaryDirectory() as tmp:
        files = write_report(result, tmp, pdf=True)
        for old in out.glob("page-*.png"):
            old.unlink()
        subprocess.run(["pdftoppm", "-r", "80", "-png", str(files.pdf), str(out / "page")], check=True)
    return sorted(out.glob("page-*.png"))


def _screenshots() -> None:
    env = {**os.environ, "WORKBENCH_SCREENSHOTS": str(ROOT / OUTPUTS["screenshots"])}
    for test in ("tests/app/test_app_browser.py", "tests/app/test_app_own_study_browser.py",
                 "tests/app/test_app_competing_browser.py"):
        subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", test], cwd=ROOT, env=env,
                       check=True)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--replicates", type=int, default=20, help="bootstrap replicates of the demo run")
    ap.add_argument("--only", default=",".join(SOURCES), help="comma-separated targets: " + ", ".join(SOURCES))
    args = ap.parse_args(argv)
    targets = [t.strip() for t in args.only.split(",") if t.strip()]
    unknown = sorted(set(targets) - set(SOURCES))
    if unknown:
        raise SystemExit(f"unknown target(s) {unknown}; choose from {list(SOURCES)}.")
    t0 = time.perf_counter()
    if {"figures", "report_pages"} & set(targets):
        sys.path.insert(0, str(Path(__file__).parent))
        from render_demo_figures import render_figures

        from workbench.study import read_study
        from workbench.workflow import run_study

        result = run_study(read_study(ROOT / "demo_cohort" / "study.toml"), replicates=args.replicates)
        if "figures" in targets:
            print(f"{len(render_figures(result, ROOT / OUTPUTS['figures']))} figures")
        if "report_pages" in targets:
            print(f"{len(_report_pages(result, ROOT / OUTPUTS['report_pages']))} report pages")
    if "screenshots" in targets:
        _screenshots()
    path = ROOT / STAMP
    stamp = json.loads(path.read_text()) if path.exists() else {}
    stamp.update({t: stamp_for(ROOT, t) for t in targets})
    path.write_text(json.dumps(dict(sorted(stamp.items())), indent=2) + "\n")
    print(f"stamped {', '.join(targets)} in {STAMP} ({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
