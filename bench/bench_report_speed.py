"""Speed of the HTML report: ``render_report`` on the demo study, before and after, side by side.

The "before" arm is the ``workbench`` package of an earlier commit (``--before``, extracted with
``git archive`` into a temporary folder); the "after" arm is this working tree. Each arm runs in its
own Python subprocess, the arms alternate (before, after, before, after, ...) so both see the same
machine load, and each child renders the report ``--renders`` times: the first render of a process
pays imports and font loading ("cold"); per figure, the least time over the later renders
("warm") of every child of an arm is reported. Every
``_figure`` call of the report is timed (wall and CPU seconds of the process); CPU seconds are the
steadier number on a shared machine.

    PYTHONPATH=. nice -n 19 python bench/bench_report_speed.py --result /path/to/study_result.pkl
    PYTHONPATH=. nice -n 19 python bench/bench_report_speed.py            # runs the demo study first

Without ``--result`` the demo study (demo_cohort/study.toml) is run with 2 validation replicates and
the quick interval / permutation settings the app uses, and pickled to a temporary file that both arms
read.

Measured 2026-12-03 15:53-16:06 UTC, 2 shared cores (load average 13.8 at the start, 8.7 at the end,
from other work), demo result with 2 replicates, ``--before 7753294 --rounds 2 --renders 2``; the
least of the 2 later renders per arm:

    render_report, warm:  CPU 26.2 s -> 20.0 s (1.3x), wall 40.5 s -> 31.0 s (1.3x)
    render_report, cold:  CPU 29.0 s -> 17.9 s (1.6x), wall 83.8 s -> 30.5 s (2.7x)
    all figures (sum of per-figure least CPU): 24.3 s -> 18.0 s (1.4x)
    calibration panels 2.67 -> 1.52 s CPU and 2.98 -> 2.23 s; forest plots 0.96-1.19 -> 0.55-0.68 s;
    proportional-hazards panels 1.99-2.38 -> 1.50-1.67 s

Single figures vary by up to 2-3x between runs on this loaded machine (e.g. "flow", 0.12 vs 0.32 s,
although its own cost hardly changed): only the sums are telling. An in-process check of the SVG step
alone (the same figure objects, the old ``savefig`` against the new ``_embed``, least of 2 each, same
session) gave 1.2-1.8x less CPU for every figure with axes titles or constrained layout (calibration
1.73 -> 0.96 s, proportional-hazards 1.80 -> 1.19 s, decision curves 0.26 -> 0.19 s), 1.03-1.06x for
the nomogram and the patient flow; all 31 figures 19.1 -> 13.0 s (1.5x).
Every report figure's SVG is byte-identical before and after except the two calibration figures,
whose rasterised PNGs are pixel-identical.

Each arm also prints where its least-CPU render's time went: drawing the figures (the plot calls,
with the few numbers they compute), the layout engine run before writing, the SVG writing, and
everything else. Measured 2026-12-04 16:49-16:53 UTC (load average 19.8 at the start, 23.5 at the end,
other work), ``--before main --rounds 1 --renders 2`` on the same report code in both arms (so the two
columns show the noise at that load: 10.5 and 8.9 s CPU): drawing 3.0-4.3 s, layout 2.4 s, SVG
writing 3.0-3.2 s, everything else 0.5-0.6 s (results_dict 0.2 s, computed once per report). In one
quieter process (load about 15) the report took 7.8-9.9 s CPU, 95% in its 31 figures, no figure
above 1.2 s, no hot spot: matplotlib's own work (axes and tick objects, text layout, path writing)
spread over every figure. The predictions the figures share cost 0.39 s in all; the SVG writer's
text measurements 0.56 s (0.24 s when each text is measured once per font, tried and left out:
it needs matplotlib's class patched while a report is written, for 4% of it).
"""

from __future__ import annotations

import argparse
import json
import os
import pickle
import subprocess
import sys
import tempfile
import time

CHILD = r"""
import json, pickle, sys, time, warnings
warnings.simplefilter("ignore")
import matplotlib
matplotlib.use("Agg")
import workbench.report.report_figures as rf
from workbench.report.html import render_report

result = pickle.load(open(sys.argv[1], "rb"))
renders = int(sys.argv[2])
inner = rf._figure
rows = []

def timed(items, key, *args, **kwargs):
    w0, c0 = time.perf_counter(), time.process_time()
    inner(items, key, *args, **kwargs)
    rows.append((key, time.perf_counter() - w0, time.process_time() - c0, bool(items[-1]["src"])))

rf._figure = timed
phases = {"draw": 0.0, "layout": 0.0, "embed": 0.0}

def phase(name, fn):
    def run(*args, **kwargs):
        c0 = time.process_time()
        try:
            return fn(*args, **kwargs)
        finally:
            phases[name] += time.process_time() - c0
    return run

# where a figure's CPU goes: drawing it (the plot call, with the numbers it computes), the layout
# engine run before writing, and the SVG writing (the rest of _embed)
rf._embed = phase("embed", rf._embed)
if hasattr(rf, "_settle_layout"):
    rf._settle_layout = phase("layout", rf._settle_layout)
timed_figure = rf._figure
rf._figure = lambda items, key, title, caption, draw, *a, **k: timed_figure(items, key, title, caption,
                                                                           phase("draw", draw), *a, **k)
out = []
for _ in range(renders):
    rows.clear()
    phases.update(draw=0.0, layout=0.0, embed=0.0)
    w0, c0 = time.perf_counter(), time.process_time()
    html = render_report(result)
    out.append({"wall": time.perf_counter() - w0, "cpu": time.process_time() - c0, "figures": list(rows),
                "chars": len(html), "phases": dict(phases)})
print("RESULT" + json.dumps(out))
"""


def demo_result(path: str) -> None:
    import warnings

    warnings.simplefilter("ignore")
    from workbench import workflow
    from workbench.app import state  # noqa: F401  (app.runs and app.state import each other; state first)
    from workbench.app.runs import quick_interval, quick_permutations
    from workbench.study import read_study

    spec = read_study("demo_cohort/study.toml")
    res = workflow.run_study(quick_interval(spec, 2), replicates=2, workers=1,
                             permutations=quick_permutations(spec, 2))
    with open(path, "wb") as fh:
        pickle.dump(res, fh)


def run_arm(root: str, result: str, renders: int) -> list[dict]:
    env = dict(os.environ, PYTHONPATH=root)
    proc = subprocess.run([sys.executable, "-c", CHILD, result, str(renders)], env=env, cwd=root,
                          capture_output=True, text=True, check=False)
    line = next((ln for ln in proc.stdout.splitlines() if ln.startswith("RESULT")), None)
    if line is None:
        raise SystemExit(f"arm at {root} failed:\n{proc.stderr[-3000:]}")
    return json.loads(line[len("RESULT"):])


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--result", help="pickled StudyResult (default: run the demo study)")
    ap.add_argument("--before", default="7753294", help="commit of the 'before' arm")
    ap.add_argument("--rounds", type=int, default=1, help="before/after pairs of child processes")
    ap.add_argument("--renders", type=int, default=2, help="renders per child (the last is reported)")
    args = ap.parse_args(argv)
    here = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    with tempfile.TemporaryDirectory() as tmp:
        result = args.result
        if result is None:
            result = os.path.join(tmp, "demo_result.pkl")
            t0 = time.perf_counter()
            demo_result(result)
            print(f"demo study run in {time.perf_counter() - t0:.0f} s")
        old = os.path.join(tmp, "before")
        os.makedirs(old)
        archive = subprocess.run(["git", "-C", here, "archive", args.before, "workbench"], capture_output=True,
                                 check=True).stdout
        subprocess.run(["tar", "-x", "-C", old], input=archive, check=True)
        print(f"load average at start: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
        runs: dict[str, list] = {"before": [], "after": []}
        for _ in range(args.rounds):
            runs["before"].append(run_arm(old, result, args.renders))
            runs["after"].append(run_arm(here, result, args.renders))
        print(f"load average at end: {os.getloadavg()[0]:.1f}")
    report(runs)


def report(runs: dict) -> None:
    """Per figure: the least CPU (and wall) time over every render after the first of each child, and
    over the rounds; a shared machine only ever adds time, so the minimum is the steadiest estimate."""
    def warm(arm):
        return [r for child in runs[arm] for r in (child[1:] or child)]

    keys = [k for k, *_ in warm("after")[0]["figures"]]
    per = {arm: {k: (min(dict((f[0], f[1]) for f in r["figures"])[k] for r in warm(arm)),
                     min(dict((f[0], f[2]) for f in r["figures"])[k] for r in warm(arm)))
                 for k in keys} for arm in runs}
    n = {arm: len(warm(arm)) for arm in runs}
    print(f"\nleast over {n['before']} (before) and {n['after']} (after) renders")
    print(f"{'figure':30s} {'before cpu':>10s} {'after cpu':>10s} {'ratio':>6s}   {'before wall':>11s} "
          f"{'after wall':>10s}")
    for k in keys:
        (bw, bc), (aw, ac) = per["before"][k], per["after"][k]
        print(f"{k:30s} {bc:10.2f} {ac:10.2f} {bc / max(ac, 1e-9):6.1f}   {bw:11.2f} {aw:10.2f}")
    fb = sum(c for _, c in per["before"].values())
    fa = sum(c for _, c in per["after"].values())
    wb = sum(w for w, _ in per["before"].values())
    wa = sum(w for w, _ in per["after"].values())
    print(f"{'all figures (sum)':30s} {fb:10.2f} {fa:10.2f} {fb / max(fa, 1e-9):6.1f}   {wb:11.2f} {wa:10.2f}")
    for label, pick in (("cold (first render)", lambda child: [child[0]]), ("warm (later renders)", lambda child:
                                                                           child[1:] or child)):
        b = [r for child in runs["before"] for r in pick(child)]
        a = [r for child in runs["after"] for r in pick(child)]
        bc, ac = min(x["cpu"] for x in b), min(x["cpu"] for x in a)
        bw, aw = min(x["wall"] for x in b), min(x["wall"] for x in a)
        print(f"render_report {label:21s} least CPU before {bc:6.1f} s after {ac:6.1f} s (ratio {bc / ac:4.1f}); "
              f"least wall before {bw:6.1f} s after {aw:6.1f} s (ratio {bw / aw:4.1f})")
    for arm in runs:  # the render with the least CPU of the arm's later renders, split by phase
        best = min(warm(arm), key=lambda r: r["cpu"])
        ph = best.get("phases", {})
        if ph:
            figs = ph["draw"] + ph["embed"]
            print(f"{arm:6s} least-CPU render {best['cpu']:5.1f} s: drawing the figures {ph['draw']:5.2f} s, "
                  f"layout before writing {ph['layout']:5.2f} s, SVG writing {ph['embed'] - ph['layout']:5.2f} s, "
                  f"everything else (results_dict, tables, text, template) {best['cpu'] - figs:5.2f} s")
    drawn = {arm: {tuple((f[0], f[3]) for f in r["figures"]) for child in runs[arm] for r in child} for arm in runs}
    print(f"same figures drawn (none failed) in both arms: {drawn['before'] == drawn['after']}")


if __name__ == "__main__":
    main()
