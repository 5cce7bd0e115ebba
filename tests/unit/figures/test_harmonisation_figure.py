"""The harmonisation-checks figure draws the numbers of the results block it is given."""

import pytest

from workbench.errors import SpecError
from workbench.figures.harmonisation import plot_harmonisation_checks


def _block(loc_b, loc_a, auc_b, auc_a):
    def one(loc, auc, stage):
        return {"n": 120, "n_features": 30, "location_share": loc, "scale_share": loc / 2, "classifier_auc": auc,
                "covariate_share": {"Stage": stage}}
    return {"before": one(loc_b, auc_b, 0.40), "after": one(loc_a, auc_a, 0.38)}


CHECKS = {"fdr": 0.05, "development": _block(0.8, 0.0, 0.97, 0.52), "external": _block(0.6, 0.05, 0.9, 0.61)}


@pytest.mark.parametrize("width", ["single", "double"])
def test_markers_sit_on_the_values(width):
    fig = plot_harmonisation_checks(CHECKS, width=width)
    assert len(fig.axes) == 2
    # side by side the rows are named once, on the left panel; stacked, on both
    named = fig.axes if width == "single" else fig.axes[:1]
    for ax in named:
        assert [t.get_text() for t in ax.get_yticklabels()] == ["Scanner shifts a feature", "Scanner scales a feature", "Scanner predictable (AUC)",
                        "Feature linked to Stage"]
    for ax, cohort in zip(fig.axes, ("development", "external"), strict=True):
        for stage, gid in (("before", "before"), ("after", "after")):
            xs = [line.get_xdata()[0] for line in ax.lines if line.get_gid() == gid]
            b = CHECKS[cohort][stage]
            # rows are drawn top to bottom in the order of the labels
            assert xs == pytest.approx([b["location_share"], b["scale_share"], b["classifier_auc"],
                                        b["covariate_share"]["Stage"]])
        assert ax.get_title(loc="left").endswith("120 patients")


def test_development_only_and_missing_block():
    fig = plot_harmonisation_checks({"fdr": 0.05, "development": CHECKS["development"]}, width="double")
    assert len(fig.axes) == 1
    with pytest.raises(SpecError, match="harmonisation"):
        plot_harmonisation_checks({}, width="double")
