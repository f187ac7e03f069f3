"""JSON epoch sets: the NPZ keys as JSON values."""

import json

import mne
import numpy as np
import pytest

from epoch_assay.engine.errors import EpochSetFormatError
from epoch_assay.engine.io.json_epochs import parse_json_epochs


def _body(**changes) -> dict:
    rng = np.random.default_rng(1)
    return {
        "data": (rng.normal(0, 5, (4, 2, 10))).tolist(),
        "sfreq": 100,
        "tmin": -0.1,
        "ch_names": ["Cz", "Pz"],
        "labels": ["a", "b", "a", "b"],
        "unit": "uV",
        "subject": "sub-01",
    } | changes


def test_arrays_are_read_as_the_npz_reader_reads_them():
    body = _body()
    parsed = parse_json_epochs(json.dumps(body).encode())
    np.testing.assert_allclose(parsed.epochs.data, np.array(body["data"]) * 1e-6)
    assert parsed.subject == "sub-01" and parsed.session is None
    assert parsed.epochs.labels.tolist() == body["labels"]


def test_positions_from_a_standard_montage_are_looked_up_by_name():
    # Reference: mne.Info.set_montage with MNE's template 10-20 montage, head coordinates (Gramfort et al.,
    # 2013, MNE-Python).
    parsed = parse_json_epochs(json.dumps(_body(montage="colin27_1020")).encode())
    info = mne.create_info(["Cz", "Pz"], 100.0, "eeg")
    info.set_montage("colin27_1020", verbose="error")
    np.testing.assert_allclose(parsed.epochs.positions, [ch["loc"][:3] for ch in info["chs"]])


@pytest.mark.parametrize(
    ("body", "field"),
    [
        (b"[1, 2]", "body"),
        (b"{not json", "body"),
        (b"[" * 100000 + b"]" * 100000, "body"),
        (json.dumps(_body(data=[[[1.0, 2.0]], [[1.0]]])).encode(), "data"),
        (json.dumps(_body(extra=1)).encode(), "extra"),
        (json.dumps(_body(labels=["a"])).encode(), "labels"),
        (json.dumps(_body(unit="V")).encode(), "data"),
        (json.dumps(_body(montage="no_such_cap")).encode(), "montage"),
        (json.dumps(_body(positions=[[0, 0, 90], [0, 0, 80]])).encode(), "positions"),
        (json.dumps(_body(subject=3)).encode(), "subject"),
    ],
)
def test_a_malformed_json_epoch_set_is_refused_naming_the_field(body, field):
    with pytest.raises(EpochSetFormatError) as caught:
        parse_json_epochs(body)
    assert caught.value.field == field
