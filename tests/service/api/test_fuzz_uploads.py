"""Hundreds of damaged uploads (truncated, flipped bytes, huge declared sizes) get 4xx answers, never 5xx.

Seeded, so a failure can be replayed: the case's name says the base file, the mutation and its number.
"""

import io
import json
import zipfile
from pathlib import Path

import numpy as np
from numpy.lib import format as npy_format

from tests.support.epoch_files import npz_bytes, small_epochs
from tests.support.recording_files import known_recording, mne_epochs_bytes, recording_bytes

N_MUTATIONS_PER_FILE = 40
EPOCHING = json.dumps({"tmin": -0.1, "tmax": 0.3, "conditions": {"a": ["a"], "b": ["b"]}})


def _huge_npz() -> bytes:
    """A valid zip whose data.npy header declares a (99999, 99999, 99999) float64 array over 16 bytes."""
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        header = io.BytesIO()
        npy_format.write_array_header_1_0(
            header, {"descr": "<f8", "fortran_order": False, "shape": (99999, 99999, 99999)}
        )
        archive.writestr("data.npy", header.getvalue() + bytes(16))
        for key, value in {
            "sfreq": 100.0,
            "tmin": 0.0,
            "ch_names": np.array(["Cz"]),
            "labels": np.array(["a"]),
        }.items():
            member = io.BytesIO()
            np.save(member, value)
            archive.writestr(f"{key}.npy", member.getvalue())
    return buffer.getvalue()


def _huge_edf(content: bytes) -> bytes:
    changed = bytearray(content)
    changed[236:244] = b"99999999"
    return bytes(changed)


def _mutations(name: str, content: bytes, seed: int) -> list[tuple[str, bytes]]:
    rng = np.random.default_rng(seed)
    cases = []
    for number in range(N_MUTATIONS_PER_FILE):
        kind = ("truncate", "flip", "flip-header", "splice")[number % 4]
        data = bytearray(content)
        if kind == "truncate":
            data = data[: int(rng.integers(0, len(data)))]
        elif kind == "flip":
            for position in rng.integers(0, len(data), size=int(rng.integers(1, 20))):
                data[position] ^= int(rng.integers(1, 256))
        elif kind == "flip-header":
            for position in rng.integers(0, min(len(data), 512), size=int(rng.integers(1, 6))):
                data[position] = int(rng.integers(0, 256))
        else:
            start = int(rng.integers(0, len(data)))
            data[start : start + 64] = rng.integers(0, 256, size=64, dtype=np.uint8).tobytes()
        cases.append((f"{name}-{kind}-{number}", bytes(data)))
    return cases


def _cases(folder: Path) -> list[tuple[str, str, bytes]]:
    npz = npz_bytes(small_epochs(seed=10, n_per_condition=4))
    edf = recording_bytes(known_recording(seconds=4.0, n_events=2), "edf")
    bdf = recording_bytes(known_recording(seconds=4.0, n_events=2), "bdf")
    body = json.dumps(
        {
            "data": np.full((2, 1, 3), 1e-5).tolist(),
            "sfreq": 100,
            "tmin": 0,
            "ch_names": ["Cz"],
            "labels": ["a", "b"],
            "subject": "sub-01",
        }
    ).encode()
    cases = [
        ("epoch-sets", *case)
        for case in _mutations("npz", npz, 1)
        + _mutations("fif", mne_epochs_bytes(small_epochs(seed=9, n_per_condition=4), folder), 2)
    ]
    cases += [("recordings", *case) for case in _mutations("edf", edf, 3) + _mutations("bdf", bdf, 4)]
    cases += [("json", *case) for case in _mutations("json", body, 5)]
    cases += [
        ("epoch-sets", "npz-huge-shape", _huge_npz()),
        ("recordings", "edf-huge-records", _huge_edf(edf)),
        ("recordings", "bdf-huge-records", _huge_edf(bdf)),
    ]
    return cases


def _post(client, study: str, route: str, content: bytes):
    if route == "json":
        return client.post(
            f"/v1/studies/{study}/epoch-sets", content=content, headers={"Content-Type": "application/json"}
        )
    data = {"subject": "sub-01"} | ({"epoching": EPOCHING} if route == "recordings" else {})
    return client.post(
        f"/v1/studies/{study}/{route}", data=data, files={"file": ("f", content, "application/octet-stream")}
    )


def test_damaged_uploads_get_4xx_or_are_stored_and_never_5xx(client, study, service, tmp_path):
    cases = _cases(tmp_path)
    assert len(cases) >= 200
    answers = {name: _post(client, study, route, content).status_code for route, name, content in cases}
    server_errors = {name: code for name, code in answers.items() if code >= 500}
    assert server_errors == {}
    assert all(code in (200, 201) or 400 <= code < 500 for code in answers.values())
    assert answers["npz-huge-shape"] == 413 and answers["edf-huge-records"] in (413, 422)
    assert client.get("/healthz").status_code == 200
    assert service.api.poll() is None
