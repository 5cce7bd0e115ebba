"""The per-centre / per-scanner report partial: numbers from the group block, absent keys tolerated."""

from __future__ import annotations

from workbench.report.heterogeneity import heterogeneity_context
from workbench.report.html import _environment

BLOCK = {
    "scanner": {
        "levels": ["scanner_A", "scanner_D"], "n": {"scanner_A": 41, "scanner_D": 83},
        "n_events": {"scanner_A": 30, "scanner_D": 50}, "censoring": "km", "pooling_method": "dl",
        "estimates": {"combined": {
            "scanner_A": {"harrell_c": {"estimate": 0.745, "ci_lower": 0.668, "ci_upper": 0.838},
                          "oe_ratio@36": {"estimate": 1.038, "ci_lower": 0.836, "ci_upper": 1.141}},
            "scanner_D": {"harrell_c": {"estimate": 0.729, "ci_lower": 0.645, "ci_upper": 0.801},
                          "oe_ratio@36": {"estimate": 1.335, "ci_lower": 1.202, "ci_upper": 1.559}}}},
        "pooled": {"combined": {"harrell_c": {"estimate": 0.74, "ci_lower": 0.68, "ci_upper": 0.79,
                                              "pi_lower": None, "pi_upper": None, "i2": 0.0}}},
    }
}


def _render(block):
    env = _environment()
    het = heterogeneity_context(block, [36], {"combined": "Clinical + imaging signature"})
    return env.get_template("_heterogeneity.html.j2").render(het=het, het_title="External cohort")


def test_partial_shows_each_level_and_the_pooled_row():
    html = _render(BLOCK)
    assert "scanner_D" in html and "1.33" in html and "1.20 to 1.56" in html
    assert "Pooled (random effects)" in html and "0.74" in html
    assert "new site" not in html.split("Pooled")[1].split("</tr>")[0]  # no PI with k = 2


def test_partial_tolerates_absent_keys():
    assert _render(None).strip() == ""
    assert "scanner_A" in _render({"scanner": {"levels": ["scanner_A"], "estimates": {"combined": {}}}})


def test_one_table_per_horizon_so_each_fits_a_page():
    est = {"estimate": 1.0, "ci_lower": 0.9, "ci_upper": 1.1}
    per_level = {"harrell_c": est, **{f"{m}@{h}": est for h in (12, 24, 36)
                                      for m in ("oe_ratio", "cal_slope", "ici", "brier")}}
    block = {"centre": {"levels": ["A", "B"], "estimates": {"combined": {"A": per_level, "B": per_level}}}}
    het = heterogeneity_context(block, [12, 24, 36])
    heads = [p["heads"] for p in het[0]["parts"]]
    assert heads[0][0] == "Harrell C" and len(heads) == 3
    assert all(len(h) <= 5 for h in heads)  # C and the four measures of one horizon at most
    assert [h[-1] for h in heads] == ["Brier 12", "Brier 24", "Brier 36"]
    html = _environment().get_template("_heterogeneity.html.j2").render(het=het, het_title="External cohort")
    assert html.count("<table") == 3 and html.count('class="note"') == 1


def test_a_withdrawn_interval_is_marked_in_its_cell_and_explained_under_the_table():
    import copy

    block = copy.deepcopy(BLOCK)
    why = "interval not reported: it would exclude its own estimate"
    block["scanner"]["estimates"]["combined"]["scanner_A"]["oe_ratio@36"] = {
        "estimate": 1.038, "ci_lower": None, "ci_upper": None, "ci_note": why}
    html = _render(block)
    cell = html.split("scanner_A")[1].split("</tr>")[0]
    assert "1.04" in cell and "no interval&dagger;" in cell
    assert f"&dagger; No interval: {why}" in html
    assert "&dagger;" not in _render(BLOCK)  # nothing withdrawn: no mark, no note
