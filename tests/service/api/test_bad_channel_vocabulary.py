"""The bad-channel criteria as a real server publishes and checks them: our own names only."""

from tests.service.api.helpers import SCORING, upload
from tests.support.epoch_files import npz_bytes, small_epochs

# Names of earlier releases that repeated other programs' option and class names.
FORMER_CLASS_NAMES = {"FlatCriterion", "CorrelationCriterion", "LineNoiseCriterion", "HighFrequencyCriterion"}
FORMER_CRITERION_KEYS = {"flat", "deviation", "correlation", "line_noise", "high_frequency"}


def _schemas(idle_service) -> dict[str, dict]:
    with idle_service.client() as http:
        answer = http.get("/openapi.json")
    assert answer.status_code == 200, answer.text
    return answer.json()["components"]["schemas"]


def test_openapi_names_and_titles_repeat_no_former_criterion_class(idle_service):
    schemas = _schemas(idle_service)
    published = set(schemas) | {schema.get("title", "") for schema in schemas.values()}
    assert not published & FORMER_CLASS_NAMES
    assert not {text for text in published if any(name in text for name in FORMER_CLASS_NAMES)}


def test_openapi_bad_channel_criteria_keys_are_our_own(idle_service):
    criteria = _schemas(idle_service)["BadChannelCriteria"]
    assert set(criteria["properties"]) == {
        "near_silent",
        "amplitude_outlier",
        "partner_agreement",
        "mains_excess",
        "fast_power_excess",
        "bridged_pair",
    }
    assert not set(criteria["properties"]) & FORMER_CRITERION_KEYS


def test_every_bad_channel_criterion_model_has_a_title_in_words(idle_service):
    schemas = _schemas(idle_service)
    references = [
        option["$ref"].rsplit("/", 1)[-1]
        for field in schemas["BadChannelCriteria"]["properties"].values()
        for option in field.get("anyOf", [field])
        if "$ref" in option
    ]
    assert len(references) == 6
    assert all(" " in schemas[name]["title"] or "-" in schemas[name]["title"] for name in references), references


def test_a_former_criterion_name_is_refused_with_422_naming_its_successor(client, study):
    epoch_set = upload(client, study, npz_bytes(small_epochs(seed=91))).json()["id"]
    pipeline = {"name": "old", "steps": [{"step": "bad_channels", "criteria": {"flat": {}}, "action": "flag"}]}
    body = {"study": study, "epoch_sets": [epoch_set], "scoring": SCORING, "pipelines": [pipeline]}
    answer = client.post("/v1/runs", json=body)
    assert answer.status_code == 422, answer.text
    assert answer.headers["content-type"].startswith("application/problem+json")
    assert "'flat' is now near_silent" in answer.text
