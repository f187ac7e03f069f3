"""Reports over HTTP: the run page with embedded figures, single figures as PNG/SVG, the study page, access."""

import base64
import re

import pytest
from sqlalchemy import create_engine, text

from tests.service.api.helpers import upload
from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.live import wait_for_run

HOSTILE_NAME = "<i>lp30</i>"
BOOTSTRAP_SCORING = {
    "conditions": ["a", "b"],
    "window_s": [0.3, 0.5],
    "alpha": 0.05,
    "correction": "fdr_bh",
    "bootstrap": {"trials_per_condition": 20, "resamples": 50, "seed": 3},
}
PIPELINES = [
    {"name": "raw", "steps": []},
    {"name": HOSTILE_NAME, "steps": [{"step": "lowpass", "cutoff_hz": 30.0}]},
    {"name": "avg", "steps": [{"step": "reference", "kind": "average"}]},
]


@pytest.fixture(scope="module")
def scored(service, request) -> tuple[str, str]:
    """(study code, run id) of a succeeded run of three pipelines on two epoch sets, in a study of the module."""
    with service.client() as http:
        code = f"reports-{request.module.__name__.rsplit('.', 1)[-1]}"
        assert http.post("/v1/studies", json={"code": code, "title": "Reports <& titles>"}).status_code == 201
        ids = [
            upload(http, code, npz_bytes(small_epochs(seed=seed)), subject=f"sub-0{seed}").json()["id"]
            for seed in (1, 2)
        ]
        created = http.post(
            "/v1/runs", json={"study": code, "epoch_sets": ids, "pipelines": PIPELINES, "scoring": BOOTSTRAP_SCORING}
        )
        assert created.status_code == 202, created.text
        assert wait_for_run(http, created.json()["id"])["status"] == "succeeded"
        return code, created.json()["id"]


def test_run_report_is_html_with_every_figure_embedded_as_a_png_data_uri(client, scored):
    _code, run_id = scored
    answer = client.get(f"/v1/runs/{run_id}/report")
    assert answer.status_code == 200, answer.text
    assert answer.headers["content-type"].startswith("text/html")
    images = re.findall(r'<img src="data:image/png;base64,([A-Za-z0-9+/=]+)"', answer.text)
    # ranking, maps of the reference and the two best others, time course, kept trials/channels, SME
    assert len(images) == 7
    assert all(base64.b64decode(image).startswith(b"\x89PNG\r\n\x1a\n") for image in images)


def test_run_report_shows_each_pipeline_against_the_reference_with_the_adjusted_p(client, scored):
    _code, run_id = scored
    page = client.get(f"/v1/runs/{run_id}/report").text
    assert "Pipelines against the reference" in page and "p adjusted" in page
    assert "max-|t| sign-flip permutation over subjects across 2 pipelines" in page


def test_run_report_loads_nothing_from_elsewhere(client, scored):
    page = client.get(f"/v1/runs/{scored[1]}/report").text
    assert "<script" not in page.lower()
    assert re.findall(r'src="(?!data:)', page) == []
    assert re.findall(r'<link[^>]*href="(?!data:)', page) == []
    assert "@import" not in page and "url(" not in page


def test_run_report_escapes_names_from_clients(client, scored):
    page = client.get(f"/v1/runs/{scored[1]}/report").text
    assert "&lt;i&gt;lp30&lt;/i&gt;" in page
    assert HOSTILE_NAME not in page


def test_run_report_names_inputs_and_provenance(client, scored):
    run_id = scored[1]
    page = client.get(f"/v1/runs/{run_id}/report").text
    document = client.get(f"/v1/runs/{run_id}/result").json()
    for epoch_set, sha256 in document["provenance"]["epoch_set_sha256"].items():
        assert epoch_set in page and sha256 in page
    assert document["provenance"]["scoring_hash"] in page
    assert f"mne {document['provenance']['software']['mne']}" in page


def test_figure_is_served_alone_as_png(client, scored):
    answer = client.get(f"/v1/runs/{scored[1]}/figures/ranking.png")
    assert answer.status_code == 200
    assert answer.headers["content-type"] == "image/png"
    assert answer.content.startswith(b"\x89PNG\r\n\x1a\n")


def test_figure_is_served_alone_as_svg(client, scored):
    answer = client.get(f"/v1/runs/{scored[1]}/figures/topomap-avg.svg")
    assert answer.status_code == 200
    assert answer.headers["content-type"].startswith("image/svg+xml")
    assert b"<svg" in answer.content


def test_unknown_figure_is_404_naming_the_figures_there_are(client, scored):
    answer = client.get(f"/v1/runs/{scored[1]}/figures/violin.png")
    assert answer.status_code == 404
    assert "ranking" in answer.json()["detail"] and "kept" in answer.json()["detail"]


def test_figure_in_an_unknown_format_is_422(client, scored):
    assert client.get(f"/v1/runs/{scored[1]}/figures/ranking.gif").status_code == 422


def test_report_needs_a_key(service, scored):
    with service.client(token=None) as anonymous:
        assert anonymous.get(f"/v1/runs/{scored[1]}/report").status_code == 401


def test_read_key_of_the_study_reads_the_report_and_another_studys_key_gets_404(service, client, scored, study):
    code, run_id = scored
    with service.client(token=service.create_key("read", code)) as reader:
        assert reader.get(f"/v1/runs/{run_id}/report").status_code == 200
        assert reader.get(f"/v1/runs/{run_id}/figures/kept.png").status_code == 200
    with service.client(token=service.create_key("read", study)) as stranger:
        assert stranger.get(f"/v1/runs/{run_id}/report").status_code == 404
        assert stranger.get(f"/v1/studies/{code}/report").status_code == 404


def test_report_of_a_run_that_failed_is_409_with_the_reason(service, client, study):
    broken = upload(client, study, npz_bytes(small_epochs(seed=5))).json()
    next((service.data_dir / "blobs").glob(f"*/{broken['sha256']}")).unlink()
    created = client.post(
        "/v1/runs",
        json={"study": study, "epoch_sets": [broken["id"]], "pipelines": PIPELINES[:1], "scoring": BOOTSTRAP_SCORING},
    )
    assert wait_for_run(client, created.json()["id"])["status"] == "failed"
    answer = client.get(f"/v1/runs/{created.json()['id']}/report")
    assert answer.status_code == 409
    assert "it failed" in answer.json()["detail"]


def test_study_report_lists_runs_and_shows_epoch_sets_on_arrival(client, scored):
    code, run_id = scored
    answer = client.get(f"/v1/studies/{code}/report")
    assert answer.status_code == 200
    page = answer.text
    assert f"runs/{run_id}/report" in page
    assert "sub-01" in page and "sub-02" in page
    assert "Reports &lt;&amp; titles&gt;" in page
    assert page.count('<img src="data:image/png;base64,') == 1


def test_study_report_shows_the_locked_pipeline_and_quality_on_arrival(client, study):
    # The median SME shown must be the one in the arrival run's result (Luck et al., 2021, computed by the engine).
    pipeline = {"name": "locked-raw", "steps": []}
    assert "No pipeline is locked" in client.get(f"/v1/studies/{study}/report").text
    client.post(f"/v1/studies/{study}/locked-pipeline", json={"pipeline": pipeline, "scoring": BOOTSTRAP_SCORING})
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=61))).json()
    (run,) = client.get("/v1/runs", params={"study": study}).json()["runs"]
    assert wait_for_run(client, run["id"])["status"] == "succeeded"
    (entry,) = client.get(f"/v1/runs/{run['id']}/result").json()["results"]
    page = client.get(f"/v1/studies/{study}/report").text
    assert "locked-raw" in page and epoch_set["id"] in page
    assert f"a: {entry['median_sme_uv']['a']:.2f}" in page
    assert f"{entry['channels_kept']} of {entry['channels_uploaded']}" in page


def _kept_figures(service, run_id: str) -> list[tuple[str, str]]:
    engine = create_engine(service.database_url)
    try:
        with engine.connect() as connection:
            rows = connection.execute(
                text("SELECT name, format FROM run_figures WHERE run_id = :run ORDER BY name, format"), {"run": run_id}
            )
            return [(row.name, row.format) for row in rows]
    finally:
        engine.dispose()


def test_a_figure_is_drawn_once_then_read_back_and_goes_with_its_run(service, client):
    with service.client() as http:
        code = "reports-kept-figures"
        assert http.post("/v1/studies", json={"code": code, "title": "Kept figures"}).status_code == 201
        ids = [upload(http, code, npz_bytes(small_epochs(seed=5)), subject="sub-05").json()["id"]]
        created = http.post(
            "/v1/runs",
            json={"study": code, "epoch_sets": ids, "pipelines": PIPELINES[:1], "scoring": BOOTSTRAP_SCORING},
        )
        assert wait_for_run(http, created.json()["id"])["status"] == "succeeded"
    run_id = created.json()["id"]
    assert _kept_figures(service, run_id) == []
    first = client.get(f"/v1/runs/{run_id}/figures/ranking.svg")
    assert first.status_code == 200
    assert _kept_figures(service, run_id) == [("ranking", "svg")]
    assert client.get(f"/v1/runs/{run_id}/figures/ranking.svg").content == first.content
    assert client.get(f"/v1/runs/{run_id}/report").status_code == 200
    assert ("ranking", "png") in _kept_figures(service, run_id)
    assert client.delete(f"/v1/runs/{run_id}").status_code == 204
    assert _kept_figures(service, run_id) == []
