"""The JSON body of POST /v1/studies/{code}/epoch-sets, for the OpenAPI document (the engine checks it)."""

from typing import Any

from service.schemas.epoch_sets import SUBJECT_PATTERN

JSON_MEDIA_TYPE = "application/json"

#: The JSON request body, documented on the multipart upload operation (one operation, two media types).
JSON_EPOCH_SET_OPENAPI: dict[str, Any] = {
    "requestBody": {
        "content": {
            JSON_MEDIA_TYPE: {
                "schema": {
                    "type": "object",
                    "required": ["data", "sfreq", "tmin", "ch_names", "labels", "subject"],
                    "properties": {
                        "data": {
                            "type": "array",
                            "description": "Nested list (n_trials, n_channels, n_times), in `unit`.",
                            "items": {"type": "array", "items": {"type": "array", "items": {"type": "number"}}},
                        },
                        "sfreq": {"type": "number"},
                        "tmin": {"type": "number"},
                        "ch_names": {"type": "array", "items": {"type": "string"}},
                        "labels": {"type": "array", "items": {"type": "string"}},
                        "ch_types": {
                            "type": "array",
                            "items": {"type": "string", "enum": ["eeg", "eog", "misc", "stim"]},
                        },
                        "unit": {"type": "string", "enum": ["V", "uV"]},
                        "positions": {
                            "type": "array",
                            "description": "[x, y, z] per channel, in m; null for an unknown coordinate.",
                            "items": {
                                "type": "array",
                                "items": {"anyOf": [{"type": "number"}, {"type": "null"}]},
                                "minItems": 3,
                                "maxItems": 3,
                            },
                        },
                        "montage": {"type": "string"},
                        "subject": {"type": "string", "pattern": SUBJECT_PATTERN},
                        "session": {"type": "string", "pattern": SUBJECT_PATTERN},
                    },
                }
            }
        }
    },
}
