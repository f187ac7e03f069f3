"""The hostile-input corpus: every case is a request the service must refuse with a 4xx, quickly and in its own words.

Files are built by the modules beside this one (seeded, from MNE's and pyedflib's writers or byte by
byte); specs are the JSON files in ``specs/`` (run bodies, JSON epoch sets, epoching specs), with
``{{study}}`` and ``{{epoch_set}}`` filled in at request time.
"""

import json
from collections.abc import Callable
from dataclasses import dataclass
from functools import cache

from tests.corpus import edf_files, fif_files, npz_files
from tests.corpus.specs import SPECS
from tests.support.recording_files import events_tsv, known_recording, recording_bytes

EPOCHING = {"tmin": -0.2, "tmax": 0.8, "conditions": {"a": ["a"], "b": ["b"]}}


@dataclass(frozen=True)
class Case:
    """One hostile request: ``route`` is one of ROUTES; ``build`` gives its parts."""

    name: str
    route: str
    build: Callable[[], dict]


ROUTES = ("epoch-set file", "epoch-set json", "recording", "run")


@cache
def _small_recording() -> bytes:
    return recording_bytes(known_recording(), "edf")


def _file(content: Callable[[], bytes]) -> Callable[[], dict]:
    return lambda: {"file": content()}


def _recording(
    content: Callable[[], bytes], epoching: Callable[[], str] = lambda: json.dumps(EPOCHING), events=None
) -> Callable[[], dict]:
    return lambda: {"file": content(), "epoching": epoching(), "events": events() if events else None}


def _spec_text(name: str) -> Callable[[], str]:
    return lambda: (SPECS / name).read_text()


def _fif_truncated() -> bytes:
    return fif_files.split_first_part()[:4096]


CASES = [
    Case("fif split file, first part", "epoch-set file", _file(fif_files.split_first_part)),
    Case("fif referring to itself", "epoch-set file", _file(lambda: fif_files.referring_to(fif_files.SELF_NAME))),
    Case(
        "fif referring to a missing file",
        "epoch-set file",
        _file(lambda: fif_files.referring_to(fif_files.MISSING_NAME)),
    ),
    Case("fif truncated", "epoch-set file", _file(_fif_truncated)),
    Case("npz of 16000 members", "epoch-set file", _file(npz_files.many_members)),
    Case("npz of 16000 repeated keys", "epoch-set file", _file(lambda: npz_files.many_members(name="data.npy"))),
    Case("npz declaring 62.5 MiB in 64 KiB", "epoch-set file", _file(npz_files.declaring_zeros)),
    Case(
        "npz with path-like member names",
        "epoch-set file",
        _file(lambda: npz_files.named_members(("../../etc/passwd.npy", "/abs/data.npy", "C:\\data.npy"))),
    ),
    Case("npz of maths member names", "epoch-set file", _file(lambda: npz_files.named_members(("$\\frac$.npy",)))),
    Case("npz needing pickles", "epoch-set file", _file(npz_files.with_object_array)),
    Case("zip magic then junk", "epoch-set file", _file(lambda: b"PK\x03\x04" + bytes(range(256)) * 8)),
    Case("empty file", "epoch-set file", _file(lambda: b"")),
    Case("edf sent as an epoch set", "epoch-set file", _file(_small_recording)),
    Case("json sent as a file", "epoch-set file", _file(lambda: (SPECS / "json-epochs-ragged.json").read_bytes())),
    *(
        Case(name, "recording", _recording(lambda content=content: content))
        for name, content in edf_files.malformed_headers().items()
    ),
    Case(
        "edf of one hour cut into 20000 epochs of 3500 s",
        "recording",
        _recording(
            edf_files.one_hour_recording,
            lambda: json.dumps(edf_files.HUGE_EPOCHING),
            edf_files.many_early_events,
        ),
    ),
    Case(
        "events.tsv of too many rows",
        "recording",
        _recording(_small_recording, events=lambda: events_tsv((1.0,) * 200_001, ("a",) * 200_001)),
    ),
    Case("npz sent as a recording", "recording", _recording(lambda: npz_files.named_members(("data.npy",)))),
    *(
        Case(path.stem, "recording", _recording(_small_recording, _spec_text(path.name)))
        for path in sorted(SPECS.glob("epoching-*.json"))
    ),
    *(
        Case(path.stem, "epoch-set json", (lambda name=path.name: {"body": _spec_text(name)()}))
        for path in sorted(SPECS.glob("json-epochs-*.json"))
    ),
    *(
        Case(path.stem, "run", (lambda name=path.name: {"body": _spec_text(name)()}))
        for path in sorted(SPECS.glob("run-*.json"))
    ),
]
