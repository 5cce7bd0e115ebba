"""The report of a study whose horizons are fractions of its time unit (years).

Found by downloading the report of scikit-survival's ``load_cgvhd`` study (follow-up in years,
horizons 0.5 and 1 year) from the app: the horizons were printed with no decimals, so the report
said "Prediction horizons: 0, 1 years" and its tables had a "0 years" row for the half-year
horizon; a single year was "1 years".
"""

from __future__ import annotations

import re
from html import unescape

import numpy as np
import pandas as pd
import pytest

from workbench.report.html import render_report
from workbench.study import study_from_dict
from workbench.workflow import run_study


@pytest.fixture(scope="module")
def text(tmp_path_factory):
    from sksurv.datasets import load_cgvhd

    X, y = load_cgvhd()  # status 1 = chronic GVHD (scikit-survival's documentation); 2, 3 counted as censored here
    folder = tmp_path_factory.mktemp("cgvhd_report")
    ids = [f"C{i:03d}" for i in range(len(X))]
    age = X["age"].to_numpy(float)
    pd.DataFrame({"patient_id": ids, "age": age, "log_age": np.log(age)}).to_csv(folder / "f.csv", index=False)
    pd.DataFrame({"patient_id": ids, "years": y["ftime"], "cgvhd": (y["status"] == 1).astype(int),
                  "dx": X["dx"].astype(str).to_numpy()}).to_csv(folder / "c.csv", index=False)
    spec = study_from_dict({
        "study": {"name": "cgvhd", "horizons": [0.5, 1.0], "seed": 3},
        "data": {"features": "f.csv", "clinical": "c.csv", "id": "patient_id", "time": "years",
                 "time_unit": "years", "event": "cgvhd"},
        "predictor": [{"column": "dx", "kind": "categorical", "reference": "CML"}],
        "models": {"fit": ["clinical"], "baseline": "clinical"},
    }, base=folder)
    result = run_study(spec, replicates=2, workers=1)  # the run records its warnings (thin follow-up at 1 year)
    page = render_report(result, figures=False)
    body = re.sub(r"<(script|style|svg)[\s\S]*?</\1>", " ", page)
    return unescape(re.sub(r"\s+", " ", re.sub(r"<[^>]+>", " ", body)))


def test_half_year_horizon_is_not_printed_as_zero(text):
    assert "Prediction horizons: 0.5, 1 years." in text
    assert not re.search(r"(?<![\d.])0 years", text), re.findall(r".{60}(?<![\d.])0 years.{20}", text)


def test_one_year_is_singular(text):
    # "1 years" alone is wrong; a list that ends with 1 ("at 0.5 and 1 years", "0.5, 1 years") is plural
    alone = [text[max(0, m.start() - 60):m.end() + 20] for m in re.finditer(r"(?<![\d.])1 years", text)
             if not re.search(r"(,|and)\s*$", text[max(0, m.start() - 6):m.start()])]
    assert not alone, alone
    assert "0.5 years" in text and "1 year " in text
