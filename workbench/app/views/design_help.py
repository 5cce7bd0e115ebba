"""The words and options of the Design page.

The help text beside each setting (``HELP``), the labels of the validation methods
and interval kinds, and the choices of the clinical-predictor table (kinds,
transforms, missing-value handling). Plain constants: no Streamlit calls.
"""

from __future__ import annotations

from workbench.preprocess.harmonize import DEFAULT_MIN_NEW_BATCH

KINDS = ("linear", "spline", "categorical", "ordinal")
TRANSFORMS = ("", "log", "log2")
MISSING = ("complete_case", "impute")
HELP = {
    "l1": "How the penalty mixes two kinds of shrinkage. 1 (LASSO) keeps few features and sets the others "
          "exactly to zero; smaller values (elastic net) keep groups of correlated features together.",
    "rule": "How strong the penalty is, chosen by cross-validation. The 1-SE rule takes the strongest penalty "
            "whose error is within one standard error of the best: fewer features, usually more stable. "
            "'Best' takes the penalty with the smallest error.",
    "folds": "The penalty is chosen by splitting the training patients into this many parts (inner folds); "
             "each part is predicted once from the others. 5 or 10 is usual.",
    "combat": "ComBat removes systematic differences between scanners (shifts and scales of each feature) "
              "while keeping differences that belong to the patients.",
    "unseen": "For an external hospital's scanner that no training patient was imaged on. 'Estimate' learns that "
              "scanner's shift and scale per feature from its own patients' features (never their outcomes; "
              f"at least {DEFAULT_MIN_NEW_BATCH} of them), keeping the training scanners' values fixed.",
    "icc": "Intraclass correlation between the first and the repeat measurement: ICC(3,1) for consistency "
           "(a shift common to all repeat values is ignored), ICC(2,1) for absolute agreement, ICC(1,1) one-way.",
    "reference": "ComBat maps every scanner onto the average of all by default. Name one scanner to map the "
                 "others onto it and leave its features exactly as measured (for a planned study on that scanner).",
    "selection": "Cross-validated penalty: the features the lasso keeps at the penalty cross-validation chooses. "
                 "Stability selection: the features the lasso picks again and again on random halves of the "
                 "patients, with a bound on the expected number of false picks (1 by default): fewer, more "
                 "reproducible features; the run takes several times longer.",
    "protect": "Clinical predictors whose link with the imaging features must survive harmonisation "
               "(for example stage, if later stages truly look different on images).",
    "missing": "Complete cases only: a patient with a missing value in this predictor is left out. "
               "Impute: the missing value is filled in from the other patients, so nobody is left out.",
    "corr": "Of two features that move together more closely than this, one is dropped: they carry "
            "the same information.",
    "screen": "Keep only features with some association with the outcome on their own, allowing for "
              "the number of features tried (false discovery rate).",
    "validation": "How the models are tested on patients they were not fitted on: the bootstrap refits "
                  "everything on resampled patients and corrects the apparent performance for optimism "
                  "(or, with a forest among the models, scores every model on the patients left out of "
                  "each resample); "
                  "cross-validation holds out parts of the cohort; leave-one-centre-out holds out each "
                  "hospital in turn.",
    "baseline": "Every other model is compared with this one (differences in C-index, Brier score...).",
    "trees": "The survival forest averages this many trees; more trees are steadier but slower.",
    "leaf": "The smallest group of patients at the end of a tree's branch; larger leaves give smoother risks.",
    "interval": "Two-stage: the whole validation is repeated in bootstrap samples of the patients, and the "
                "interval comes from how much the validated numbers vary between them (the interval that "
                "covered in simulation). Quick percentile: cheap, known to be too narrow; for a first look only.",
    "outer": "Bootstrap samples in which the whole validation is repeated for the intervals. Each costs "
             "(inner replicates + 1) refits of every model. 100 or more for a final analysis. Cross-validation "
             "needs none: its interval comes from the spread of its own fold results (corrected for their "
             "overlap).",
    "inner": "Bootstrap replicates of the validation inside each outer sample (bootstrap validation only).",
    "permutations": "Permutations of the added-value test of imaging given the clinical model. Each refits "
                    "the whole signature; 199 give p-values down to 0.005, 999 for a final analysis; "
                    "0 leaves the test out.",
    "av_folds": "Folds of the cross-validated likelihood the added-value test compares.",
    "horizons": "Times at which survival is estimated and the models are compared; proposed from the "
                "follow-up of your cohort, inside its range.",
}
INTERVAL_LABELS = {"two-stage": "Two-stage", "shifted-percentile": "Quick (too narrow)"}
METHOD_LABELS = {
    "bootstrap": "Bootstrap (refit on resampled patients)",
    "cv": "Repeated k-fold cross-validation",
    "by_centre": "Leave one centre out",
    "none": "Apparent performance only",
}
