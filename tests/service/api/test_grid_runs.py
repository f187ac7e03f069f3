"""Grid runs through real processes: expansion, validation, the cap, and the multiverse result parts."""

from tests.service.api.helpers import SCORING, run_and_wait, upload
from tests.support.epoch_files import npz_bytes, small_epochs

GRID = {
    "factors": {
        "highpass": {"none": [], "1": [{"step": "highpass", "cutoff_hz": 1.0, "allow_short_epochs": True}]},
        "reference": {
            "average": [{"step": "reference", "kind": "average"}],
            "cz": [{"step": "reference", "kind": "channels", "channels": ["Cz"]}],
        },
    }
}
NAMES = [
    "highpass=none,reference=average",
    "highpass=none,reference=cz",
    "highpass=1,reference=average",
    "highpass=1,reference=cz",
]


def uploaded_ids(client, study, n: int = 3) -> list[str]:
    return [
        upload(client, study, npz_bytes(small_epochs(seed=20 + i)), subject=f"sub-{i + 1:02d}").json()["id"]
        for i in range(n)
    ]


def test_grid_run_scores_every_combination_and_ranks_them(client, study):
    ids = uploaded_ids(client, study)
    document = run_and_wait(client, {"study": study, "epoch_sets": ids, "grid": GRID, "scoring": SCORING})
    assert [entry["pipeline"] for entry in document["results"][:4]] == NAMES
    assert sorted(entry["pipeline"] for entry in document["ranking"]) == sorted(NAMES)
    assert set(document["factor_effects"]["factors"]) == {"highpass", "reference"}
    assert set(document["cache"]) == {"hits", "misses"}


def test_grid_run_lists_its_expanded_pipeline_names(client, study):
    ids = uploaded_ids(client, study, 1)
    created = client.post("/v1/runs", json={"study": study, "epoch_sets": ids, "grid": GRID, "scoring": SCORING})
    assert client.get(f"/v1/runs/{created.json()['id']}").json()["pipelines"] == NAMES


def test_grid_pipeline_that_cannot_run_is_refused_with_its_name(client, study):
    ids = uploaded_ids(client, study, 1)
    grid = {"factors": {"reference": {"bad": [{"step": "reference", "kind": "channels", "channels": ["Nope"]}]}}}
    answer = client.post("/v1/runs", json={"study": study, "epoch_sets": ids, "grid": grid, "scoring": SCORING})
    assert answer.status_code == 422
    assert answer.json()["errors"][0]["loc"][:3] == ["body", "grid", "reference=bad"]


def test_grid_past_the_pipeline_cap_is_refused(client, study):
    ids = uploaded_ids(client, study, 1)
    levels = {str(i): [] for i in range(30)}
    grid = {"factors": {"a": levels, "b": levels}}  # 900 pipelines > 512
    answer = client.post("/v1/runs", json={"study": study, "epoch_sets": ids, "grid": grid, "scoring": SCORING})
    assert answer.status_code == 422 and "900 pipelines" in answer.json()["detail"]


def test_run_with_both_pipelines_and_grid_is_refused(client, study):
    ids = uploaded_ids(client, study, 1)
    body = {
        "study": study,
        "epoch_sets": ids,
        "grid": GRID,
        "pipelines": [{"name": "raw", "steps": []}],
        "scoring": SCORING,
    }
    assert client.post("/v1/runs", json=body).status_code == 422


def test_selection_on_tuning_subjects_is_reported(client, study):
    ids = uploaded_ids(client, study)
    selection = {"rule": "tuning_holdout", "tuning_subjects": ["sub-01", "sub-02"]}
    document = run_and_wait(
        client, {"study": study, "epoch_sets": ids, "grid": GRID, "scoring": SCORING, "selection": selection}
    )
    assert document["selection"]["holdout_subjects"] == ["sub-03"] and document["selection"]["winner"] in NAMES
