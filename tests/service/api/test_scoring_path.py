"""The whole path through real processes: study → upload → run → poll → result."""

import numpy as np
from scipy import stats

from epoch_assay.engine.document import RESULT_SCHEMA_VERSION
from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import npz_bytes, small_epochs


def test_upload_answers_with_the_epoch_set_summary(client, study):
    epochs = small_epochs(seed=1)
    answer = upload(client, study, npz_bytes(epochs))
    assert answer.status_code == 201, answer.text
    body = answer.json()
    assert (body["n_trials"], body["n_channels"], body["n_times"]) == epochs.data.shape
    assert body["conditions"] == {"a": 30, "b": 30}
    assert body["sfreq"] == 100.0 and body["subject"] == "sub-01" and body["session"] == "ses-01"
    assert len(body["sha256"]) == 64


def test_same_bytes_uploaded_twice_give_the_stored_epoch_set(client, study):
    content = npz_bytes(small_epochs(seed=2))
    first = upload(client, study, content)
    second = upload(client, study, content)
    assert (first.status_code, second.status_code) == (201, 200)
    assert first.json()["id"] == second.json()["id"]
    assert len(client.get(f"/v1/studies/{study}/epoch-sets").json()) == 1


def test_run_result_p_values_match_scipy_welch(client, study):
    epochs = small_epochs(seed=3)
    epoch_set = upload(client, study, npz_bytes(epochs)).json()
    document = run_and_wait(
        client,
        {
            "study": study,
            "epoch_sets": [epoch_set["id"]],
            "pipelines": [{"name": "raw", "steps": []}],
            "scoring": SCORING,
        },
    )
    (entry,) = document["results"]
    in_window = (epochs.times >= 0.3 - 1e-9) & (epochs.times <= 0.5 + 1e-9)
    means = epochs.data[:, :, in_window].mean(axis=2)
    # Reference: scipy.stats.ttest_ind with equal_var=False is Welch's t-test (Virtanen et al., 2020, SciPy 1.0).
    expected = stats.ttest_ind(means[epochs.labels == "a"], means[epochs.labels == "b"], equal_var=False)
    np.testing.assert_allclose([c["statistic"] for c in entry["channels"]], expected.statistic, rtol=1e-9)
    np.testing.assert_allclose([c["p"] for c in entry["channels"]], expected.pvalue, rtol=1e-9)
    assert entry["n_trials"] == {"a": 30, "b": 30}
    significant = [c["significant"] for c in entry["channels"]]
    assert entry["significant_fraction"] == sum(significant) / len(significant)


def test_bootstrap_with_the_same_seed_gives_the_same_numbers(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=4))).json()
    body = {
        "study": study,
        "epoch_sets": [epoch_set["id"]],
        "pipelines": [{"name": "raw", "steps": []}],
        "scoring": SCORING | {"bootstrap": {"trials_per_condition": 20, "resamples": 200, "seed": 11}},
    }
    first = run_and_wait(client, body)["results"][0]["bootstrap"]
    second = run_and_wait(client, body)["results"][0]["bootstrap"]
    assert first == second
    assert first["resamples"] == 200 and first["trials_per_condition"] == 20
    assert 0.0 <= first["spread_low"] <= first["subset_mean"] <= first["spread_high"] <= 1.0


def test_every_pipeline_step_of_the_foundation_runs_and_reports_provenance(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=5))).json()
    steps = [
        {"step": "highpass", "cutoff_hz": 0.5, "allow_short_epochs": True},
        {"step": "lowpass", "cutoff_hz": 30.0},
        {"step": "reference", "kind": "channels", "channels": ["TP9", "TP10"]},
        {"step": "baseline", "window_s": [-0.2, 0.0]},
    ]
    document = run_and_wait(
        client,
        {
            "study": study,
            "epoch_sets": [epoch_set["id"]],
            "pipelines": [{"name": "full", "steps": steps}],
            "scoring": SCORING,
        },
    )
    (entry,) = document["results"]
    assert [record["step"] for record in entry["provenance"]] == ["highpass", "lowpass", "reference", "baseline"]
    assert any("high-pass" in warning or "highpass" in warning for warning in entry["warnings"])
    assert document["schema_version"] == RESULT_SCHEMA_VERSION
    assert document["provenance"]["pipeline_hashes"]["full"] == entry["pipeline_hash"]


def test_runs_are_listed_by_study(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=6))).json()
    run_and_wait(
        client,
        {
            "study": study,
            "epoch_sets": [epoch_set["id"]],
            "pipelines": [{"name": "raw", "steps": []}],
            "scoring": SCORING,
        },
    )
    listed = client.get("/v1/runs", params={"study": study}).json()["runs"]
    assert len(listed) == 1 and listed[0]["status"] == "succeeded" and listed[0]["progress"] == 1.0
