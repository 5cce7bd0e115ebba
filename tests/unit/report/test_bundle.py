"""The model bundle: round trips in a fresh process, tamper and version refusal, the codec table.

Round trips use the demo study (demo_cohort/study.toml, invented data) because the
bundle must carry exactly what its four model types learned there; the forest gets
25 trees to keep the file fast. Codec checks of the forest's stored trees compare
with scikit-learn's own ``Tree.apply`` on GBSG2 (Schumacher et al. 1994, shipped
with scikit-survival).
"""

from __future__ import annotations

import hashlib
import json
import shutil
import subprocess
import sys
import zipfile
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import workbench
from workbench.cohort.outcome import make_outcome
from workbench.errors import BundleError
from workbench.models.forest import SurvivalForest, permutation_importance
from workbench.models.registry import COMPARISON_MODELS, build_models, offered_models
from workbench.prepare import prepare_cohort
from workbench.report._codec import CODECS, StoredTree, decode_model, encode_model, encode_value
from workbench.report.bundle import (
    BundleVersionWarning,
    load_bundle,
    manifest_checksum,
    save_bundle,
)
from workbench.report.bundle_training import summarise_training
from workbench.study import dumps_study, read_study

REPO = Path(__file__).resolve().parents[3]
TIMES = np.r_[0.0, np.linspace(1.0, 60.0, 30), 12.0, 24.0, 36.0]
GRID = np.unique(TIMES)

FRESH = """
import sys, warnings
import numpy as np
from workbench.prepare import prepare_cohort
from workbench.report.bundle import load_bundle
grid = np.load(sys.argv[3])
out = {}
cohort = None
for tag, path in (("dir", sys.argv[1]), ("zip", sys.argv[2])):
    b = load_bundle(path)
    cohort = cohort or prepare_cohort(b.spec).cohort  # read through the spec the bundle carries
    c = cohort
    for name, m in b.models.items():
        out[f"{tag}/{name}/risk"] = m.predict_risk(c).values
        out[f"{tag}/{name}/surv"] = m.predict_survival(c, grid).probs
np.savez(sys.argv[4], **out)
"""


@pytest.fixture(scope="module")
def demo():
    spec = read_study(REPO / "demo_cohort" / "study.toml")
    spec = replace(spec, models=replace(spec.models, fit=("clinical", "combined", "penalised_all", "forest"),
                                        forest=replace(spec.models.forest, trees=25)))
    cohort = prepare_cohort(spec).cohort
    models = {k: m.fit(cohort) for k, m in build_models(spec).items()}
    return spec, cohort, models, summarise_training(cohort, models, spec.horizons)


@pytest.fixture(scope="module")
def saved(demo, tmp_path_factory):
    spec, _, models, training = demo
    d = tmp_path_factory.mktemp("bundle")
    folder = save_bundle(models, spec, training, d / "demo_bundle")
    archive = save_bundle(models, spec, training, d / "demo_bundle.zip")
    return folder, archive


def _copy(folder: Path, tmp_path: Path) -> Path:
    return Path(shutil.copytree(folder, tmp_path / "copy"))


def _manifest(folder: Path) -> dict:
    return json.loads((folder / "manifest.json").read_text())


def _rewrite_manifest(folder: Path, m: dict, *, fix_checksum: bool) -> None:
    if fix_checksum:
        m["manifest_sha256"] = manifest_checksum(m)
    (folder / "manifest.json").write_text(json.dumps(m, indent=2, sort_keys=True))


# ------------------------------------------------------------------ round trips


def test_round_trip_in_a_fresh_process_is_exact(demo, saved, tmp_path):
    _, cohort, models, _ = demo
    folder, archive = saved
    np.save(tmp_path / "grid.npy", GRID)
    subprocess.run([sys.executable, "-c", FRESH, str(folder), str(archive), str(tmp_path / "grid.npy"),
                    str(tmp_path / "out.npz")], check=True, cwd=REPO, capture_output=True, timeout=300)
    with np.load(tmp_path / "out.npz", allow_pickle=False) as out:
        # the demo names a volume feature: its clinical + volume comparison model stays out of bundles
        assert "clinical_volume" in models and "clinical_volume" in COMPARISON_MODELS
        assert not any(k.split("/")[1] == "clinical_volume" for k in out.files)
        assert {k.split("/")[1] for k in out.files} == set(offered_models(models))
        for name, m in offered_models(models).items():
            risk, surv = m.predict_risk(cohort).values, m.predict_survival(cohort, GRID).probs
            for tag in ("dir", "zip"):
                assert np.max(np.abs(out[f"{tag}/{name}/risk"] - risk)) <= 1e-12, (tag, name)
                assert np.max(np.abs(out[f"{tag}/{name}/surv"] - surv)) <= 1e-12, (tag, name)
            assert np.ptp(risk) > 0  # the comparison is not between constants


def test_loaded_bundle_keeps_spec_and_delta_intervals(demo, saved):
    spec, cohort, models, _ = demo
    b = load_bundle(saved[0])
    assert dumps_study(b.spec, base=REPO) == dumps_study(spec, base=REPO)
    rows = cohort.take(np.arange(5))
    for name in ("clinical", "combined"):
        a = models[name].predict_survival_with_ci(rows, [12, 24, 36])
        z = b.models[name].predict_survival_with_ci(rows, [12, 24, 36])
        np.testing.assert_array_equal(a.lower, z.lower)
        np.testing.assert_array_equal(a.upper, z.upper)
    assert b.models["combined"].selected_features_ == models["combined"].selected_features_


# ------------------------------------------------------------------ manifest


def test_manifest_contents(demo, saved):
    spec, cohort, models, _ = demo
    m = _manifest(saved[0])
    assert m["format_version"] == 1 and m["workbench_version"] == workbench.__version__
    assert {"numpy", "scikit-learn", "python"} <= set(m["packages"])
    assert m["time_unit"] == "months"
    inp = m["inputs"]
    assert [c["column"] for c in inp["clinical"]] == [p.column for p in spec.predictors]
    age = next(c for c in inp["clinical"] if c["column"] == "age")
    assert (age["kind"], age["unit"]) == ("linear", "years")
    assert age["train_min"] == pytest.approx(cohort.clinical["age"].astype(float).min())
    assert age["train_max"] == pytest.approx(cohort.clinical["age"].astype(float).max())
    stage = next(c for c in inp["clinical"] if c["column"] == "stage")
    assert stage["levels"] == ["I", "II", "III", "IV"]
    assert inp["imaging_features"] == cohort.feature_names
    assert inp["batches"] == sorted(set(cohort.batch)) and inp["batch_column"] == "scanner"
    assert m["models"]["clinical"]["inputs"]["imaging_features"] == []
    tr = m["training"]
    assert (tr["n_patients"], tr["n_events"]) == (cohort.n, cohort.n_events)
    assert [h["horizon"] for h in tr["horizons"]] == list(spec.horizons)
    # every file is listed with its checksum
    listed = set(m["files"])
    on_disk = {p.relative_to(saved[0]).as_posix() for p in saved[0].rglob("*") if p.is_file()}
    assert listed == on_disk - {"manifest.json"}
    for name, digest in m["files"].items():
        assert hashlib.sha256((saved[0] / name).read_bytes()).hexdigest() == digest


def test_no_patient_identifier_is_saved(demo, saved):
    _, cohort, _, _ = demo
    text = "".join(p.read_text() for p in saved[0].rglob("*.json"))
    found = [i for i in cohort.ids if i in text]
    assert found == []


def test_training_summary_cutpoints_and_percentiles(demo):
    _, cohort, models, training = demo
    risk = models["clinical"].predict_risk(cohort).values
    np.testing.assert_allclose(training.risk_cutpoints["clinical"], np.quantile(risk, [1 / 3, 2 / 3]))
    f = cohort.feature_names[7]
    assert training.imaging_p99[f] == pytest.approx(np.percentile(cohort.features[f], 99))
    assert training.last_event_time == pytest.approx(cohort.time[cohort.event].max())


def test_arrays_load_without_pickle(saved):
    for p in saved[0].rglob("*.npz"):
        with np.load(p, allow_pickle=False) as z:
            assert all(z[k].dtype.kind in "biufU" for k in z.files)


# ------------------------------------------------------------------ refusals


def test_one_changed_byte_in_an_array_file_is_refused(saved, tmp_path):
    folder = _copy(saved[0], tmp_path)
    target = next((folder / "models").glob("*clinical.npz"))
    data = bytearray(target.read_bytes())
    data[len(data) // 2] ^= 0x01
    target.write_bytes(bytes(data))
    with pytest.raises(BundleError, match=rf"{target.name} was changed or damaged"):
        load_bundle(folder)


def test_edited_json_values_are_refused(saved, tmp_path):
    folder = _copy(saved[0], tmp_path)
    state = next((folder / "models").glob("*clinical.json"))
    text = state.read_text()
    state.write_text(text.replace('"ties":"efron"', '"ties":"breslow"', 1))
    assert state.read_text() != text
    with pytest.raises(BundleError, match="checksum does not match"):
        load_bundle(folder)
    state.write_text(text)
    m = _manifest(folder)
    m["training"]["n_events"] += 1
    _rewrite_manifest(folder, m, fix_checksum=False)
    with pytest.raises(BundleError, match="manifest.json was changed"):
        load_bundle(folder)


def test_tampered_zip_member_is_refused(saved, tmp_path):
    src = zipfile.ZipFile(saved[1])
    out = tmp_path / "edited.zip"
    with zipfile.ZipFile(out, "w") as dst:
        for info in src.infolist():
            data = src.read(info)
            if info.filename.endswith("forest.npz"):
                data = data[:-40] + bytes([data[-40] ^ 0xFF]) + data[-39:]
            dst.writestr(info, data)
    with pytest.raises(BundleError, match="forest.npz was changed"):
        load_bundle(out)


def test_workbench_version_mismatch_is_refused(saved, tmp_path):
    folder = _copy(saved[0], tmp_path)
    m = _manifest(folder)
    major, minor = workbench.__version__.split(".")[:2]
    m["workbench_version"] = f"{major}.{int(minor) + 1}.0"
    _rewrite_manifest(folder, m, fix_checksum=True)  # the checksum passes, so the version check itself fires
    with pytest.raises(BundleError, match=rf"written by workbench {major}\.{int(minor) + 1}\.0"):
        load_bundle(folder)
    m["workbench_version"] = f"{major}.{minor}.99"  # a patch release reads it
    _rewrite_manifest(folder, m, fix_checksum=True)
    assert set(load_bundle(folder).models) == {"clinical", "combined", "penalised_all", "forest"}


def test_unknown_format_version_is_refused(saved, tmp_path):
    folder = _copy(saved[0], tmp_path)
    m = _manifest(folder)
    m["format_version"] = 2
    _rewrite_manifest(folder, m, fix_checksum=True)
    with pytest.raises(BundleError, match="format version 2"):
        load_bundle(folder)


def test_other_library_versions_warn(saved, tmp_path):
    folder = _copy(saved[0], tmp_path)
    m = _manifest(folder)
    m["packages"]["numpy"] = "1.0.0"
    _rewrite_manifest(folder, m, fix_checksum=True)
    with pytest.warns(BundleVersionWarning, match="numpy 1.0.0 -> "):
        b = load_bundle(folder)
    assert "clinical" in b.models


def test_unknown_class_is_refused_even_with_valid_checksums(saved, tmp_path):
    folder = _copy(saved[0], tmp_path)
    state = next((folder / "models").glob("*clinical.json"))
    state.write_text(state.read_text().replace('"$object":"ClinicalTransformer"', '"$object":"Popen"'))
    m = _manifest(folder)
    m["files"][state.relative_to(folder).as_posix()] = hashlib.sha256(state.read_bytes()).hexdigest()
    _rewrite_manifest(folder, m, fix_checksum=True)
    with pytest.raises(BundleError, match="'Popen'"):
        load_bundle(folder)
    m["models"]["clinical"]["classes"].append("Popen")
    _rewrite_manifest(folder, m, fix_checksum=True)
    with pytest.raises(BundleError, match=r"class\(es\) \['Popen'\]"):
        load_bundle(folder)


def test_a_pickled_array_is_refused_even_with_valid_checksums(saved, tmp_path):
    folder = _copy(saved[0], tmp_path)
    target = next((folder / "models").glob("*clinical.npz"))
    with np.load(target) as z:
        arrays = {k: z[k] for k in z.files}
    arrays["a0"] = np.array([{"runs": "code"}], dtype=object)  # np.savez pickles object arrays
    np.savez(target, **arrays)
    m = _manifest(folder)
    m["files"][target.relative_to(folder).as_posix()] = hashlib.sha256(target.read_bytes()).hexdigest()
    _rewrite_manifest(folder, m, fix_checksum=True)
    with pytest.raises(BundleError, match="contents are malformed .*allow_pickle=False"):
        load_bundle(folder)


def test_missing_and_foreign_paths(tmp_path):
    with pytest.raises(BundleError, match="no bundle here"):
        load_bundle(tmp_path / "nothing")
    (tmp_path / "plain.txt").write_text("hello")
    with pytest.raises(BundleError, match="neither a bundle folder nor a .zip"):
        load_bundle(tmp_path / "plain.txt")
    (tmp_path / "d").mkdir()
    (tmp_path / "d" / "manifest.json").write_text('{"format": "something else"}')
    with pytest.raises(BundleError, match="not a workbench model bundle"):
        load_bundle(tmp_path / "d")


def test_save_refuses_a_non_empty_folder_unless_it_is_a_bundle(demo, saved, tmp_path):
    spec, _, models, training = demo
    (tmp_path / "busy").mkdir()
    (tmp_path / "busy" / "notes.txt").write_text("mine")
    with pytest.raises(BundleError, match="not empty"):
        save_bundle({"clinical": models["clinical"]}, spec, training, tmp_path / "busy", overwrite=True)
    folder = _copy(saved[0], tmp_path)
    with pytest.raises(BundleError, match="overwrite=True"):
        save_bundle({"clinical": models["clinical"]}, spec, training, folder)
    save_bundle({"clinical": models["clinical"]}, spec, training, folder, overwrite=True)
    assert list(load_bundle(folder).models) == ["clinical"]


# ------------------------------------------------------------------ the codec table


def test_a_learned_attribute_missing_from_the_table_is_refused(saved):
    m = load_bundle(saved[0]).models["clinical"]
    m.calibration_slope_ = 0.9
    with pytest.raises(BundleError, match=r"calibration_slope_"):
        encode_model(m)


def test_foreign_objects_are_not_encoded():
    with pytest.raises(BundleError, match="cannot be saved"):
        encode_value(np.random.default_rng(1), store=None)
    with pytest.raises(BundleError, match="cannot be saved"):
        encode_value(np.array([object()], dtype=object), store=None)


def test_table_lists_every_model_class():
    assert {"ClinicalCox", "CombinedCox", "PenalisedAllCox", "ForestModel", "SurvivalForest"} <= set(CODECS)
    assert all(c.cls.__name__ == name for name, c in CODECS.items())


@pytest.fixture(scope="module")
def gbsg2_forest():
    from sksurv.datasets import load_gbsg2

    X, y = load_gbsg2()
    Xn = X[["age", "tsize", "pnodes", "progrec", "estrec"]].astype(float)
    y = make_outcome(y["time"], y["cens"])
    return SurvivalForest(12, min_samples_leaf=10, random_state=4).fit(Xn, y), Xn, y


@pytest.mark.filterwarnings("ignore::workbench.errors.WorkbenchWarning")
def test_stored_trees_route_rows_like_scikit_learn(gbsg2_forest):
    forest, X, y = gbsg2_forest
    Xa = X.to_numpy(dtype=np.float32)
    for tree in forest.trees_:
        stored = StoredTree(tree.children_left, tree.children_right, tree.feature, tree.threshold)
        np.testing.assert_array_equal(stored.apply(Xa), tree.apply(Xa))
    tree_, arrays = encode_model(forest)
    back = decode_model(tree_, arrays)
    np.testing.assert_array_equal(back.predict_risk(X), forest.predict_risk(X))
    np.testing.assert_array_equal(back.predict_survival(X, [365.0, 1000.0]), forest.predict_survival(X, [365.0, 1000.0]))
    for rows in ("held-out", "out-of-bag"):
        a = permutation_importance(forest, X, y, n_repeats=2, random_state=1, rows=rows)
        b = permutation_importance(back, X, y, n_repeats=2, random_state=1, rows=rows)
        np.testing.assert_array_equal(a.drops, b.drops)


@pytest.mark.filterwarnings("ignore::workbench.errors.WorkbenchWarning")
def test_a_damaged_tree_is_refused(gbsg2_forest):
    forest, _, _ = gbsg2_forest
    tree_, arrays = encode_model(forest)
    key = tree_["state"]["trees"]["children_left"]["$array"]
    bad = arrays[key].copy()
    bad[0] = 0  # the root pointing at itself would never end a walk
    with pytest.raises(BundleError, match="not a valid tree"):
        decode_model(tree_, {**arrays, key: bad})
