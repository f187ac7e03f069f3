"""Webhook signatures against a Standard Webhooks implementation the project did not write."""

from datetime import UTC, datetime

from standardwebhooks.webhooks import Webhook

from worker.delivery import signature

SECRET = "whsec_K34VFiiu0qar9xWICc9PPHYnGb0bUdQ2k1w/nNW/CP4="
BODY = '{"id":"evt_0c1d2e3f4a5b6c7d","type":"run.succeeded"}'


def test_signature_equals_the_standardwebhooks_library_signature() -> None:
    # Reference: standardwebhooks (PyPI), Webhook.sign, v1 scheme of the Standard Webhooks specification.
    timestamp = 1_764_669_600
    expected = Webhook(SECRET).sign("dlv_77b0e3d1c2a45f68", datetime.fromtimestamp(timestamp, tz=UTC), BODY)
    assert signature(SECRET, "dlv_77b0e3d1c2a45f68", timestamp, BODY) == expected


def test_secret_made_before_base64_keys_still_signs_the_way_verifiers_read_it() -> None:
    # Secrets of earlier releases are whsec_ and 64 hex digits; hex digits are base64 too, so
    # a verifier decodes them to the same 48-byte key the worker signs with.
    old_secret = "whsec_" + "2b7e151628aed2a6abf7158809cf4f3c762e7160f38b4da56a784d9045190cfe"
    timestamp = 1_764_669_600
    expected = Webhook(old_secret).sign("dlv_1", datetime.fromtimestamp(timestamp, tz=UTC), BODY)
    assert signature(old_secret, "dlv_1", timestamp, BODY) == expected
