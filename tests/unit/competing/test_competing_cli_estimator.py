"""``workbench competing --estimator``: the choice reaches the route and is written to the output.

Data: scikit-survival's load_cgvhd (clinical only, via the shared ``cgvhd_study`` fixture).
"""

from __future__ import annotations

import json

import pytest

from workbench.cli import COMPETING_ESTIMATORS, build_parser, main
from workbench.competing.estimates import ESTIMATOR_LABELS, ESTIMATORS


def test_the_flag_offers_exactly_the_route_estimators():
    assert set(COMPETING_ESTIMATORS) == set(ESTIMATORS)
    assert build_parser().parse_args(["competing", "s.toml"]).estimator == "632plus"
    with pytest.raises(SystemExit) as exc:
        build_parser().parse_args(["competing", "s.toml", "--estimator", "cv"])
    assert exc.value.code == 2


def test_the_chosen_estimator_is_used_and_written(cgvhd_study, capsys, monkeypatch):
    import tomli_w

    import workbench.competing.analysis as analysis

    seen, real = [], analysis.run_competing

    def spy(*args, **kwargs):
        seen.append(kwargs.get("estimator"))
        return real(*args, **kwargs)

    monkeypatch.setattr(analysis, "run_competing", spy)
    folder, doc, _ = cgvhd_study
    (folder / "study.toml").write_text(tomli_w.dumps(doc))
    out = folder / "out_oob"
    assert main(["competing", str(folder / "study.toml"), "--out", str(out), "--replicates", "2", "--quiet",
                 "--no-figures", "--estimator", "oob"]) == 0
    assert seen == ["oob"]
    res = json.loads((out / "competing_results.json").read_text())
    assert res["validation"]["estimator"] == "oob"
    assert res["validation"]["method"] == ESTIMATOR_LABELS["oob"]
    assert f"by {ESTIMATOR_LABELS['oob']}" in capsys.readouterr().out
