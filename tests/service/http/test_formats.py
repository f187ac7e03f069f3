"""Pure helpers of the API, without a server: content negotiation, the CSV table, keyset cursors."""

import csv
import io
from datetime import UTC, datetime

import pytest

from epoch_assay.engine.document import RunResultDocument
from service.errors import Unprocessable
from service.http.pagination import decode_cursor, encode_cursor
from service.http.result_csv import COLUMNS, preferred_media_type, result_csv
from tests.support.result_documents import result_document, scored_entry

OFFERED = ("application/json", "text/csv")


@pytest.mark.parametrize(
    ("accept", "chosen"),
    [
        ("", "application/json"),
        ("*/*", "application/json"),
        ("text/csv", "text/csv"),
        ("text/*", "text/csv"),
        ("application/json;q=0.5, text/csv", "text/csv"),
        ("text/csv;q=0, */*", "application/json"),
        ("text/html, */*;q=0.8", "application/json"),
        ("application/xml", None),
    ],
)
def test_the_accept_header_picks_the_media_type_it_rates_highest(accept, chosen):
    # Reference: RFC 9110 §12.5.1 (Accept): the most specific range sets a type's quality; q=0 refuses it.
    assert preferred_media_type(accept, OFFERED) == chosen


def _document(**entry_changes) -> RunResultDocument:
    """The fixture document with one entry of two channels, Cz and Pz, changed by ``entry_changes``."""
    channel = scored_entry().channels[0]
    channels = [
        channel.model_copy(update={"name": "Cz", "statistic": 2.5, "p": 0.01, "p_adjusted": 0.02, "significant": True}),
        channel.model_copy(update={"name": "Pz", "statistic": -0.1, "p": 0.9, "p_adjusted": 0.9, "significant": False}),
    ]
    entry = scored_entry(
        session=None, n_trials={"a": 30, "b": 29}, significant_fraction=0.5, channels=channels, bootstrap=None
    )
    return result_document(results=[entry.model_copy(update=entry_changes)])


def _rows(document: RunResultDocument) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(result_csv(document))))


def test_each_channel_is_one_row_with_the_entry_repeated():
    rows = _rows(_document())
    assert [row["channel"] for row in rows] == ["Cz", "Pz"]
    assert rows[0]["n_trials_a"] == "30" and rows[0]["n_trials_b"] == "29" and rows[0]["condition_a"] == "a"
    assert (rows[0]["significant"], rows[1]["significant"]) == ("true", "false")
    assert rows[0]["session"] == "" and rows[0]["bootstrap_subset_mean"] == ""
    assert rows[0]["statistic_name"] == "welch_t"
    assert list(rows[0]) == list(COLUMNS)


def test_an_entry_that_could_not_be_scored_is_one_row_carrying_its_error():
    (row,) = _rows(_document(channels=None, n_trials=None, significant_fraction=None, error="too few trials"))
    assert row["error"] == "too few trials" and row["channel"] == "" and row["p"] == ""


def test_text_a_spreadsheet_would_run_as_a_formula_is_quoted():
    document = _document()
    channels = document.results[0].channels
    renamed = [channels[0].model_copy(update={"name": "=HYPERLINK(1)"}), channels[1]]
    rows = _rows(_document(channels=renamed))
    assert rows[0]["channel"] == "'=HYPERLINK(1)" and rows[1]["statistic"] == "-0.1"


def test_a_cursor_gives_back_the_position_it_was_made_from():
    moment = datetime(2026, 12, 1, 10, 0, 0, 123456, tzinfo=UTC)
    assert decode_cursor(encode_cursor(moment, "run_abc")) == (moment, "run_abc")


@pytest.mark.parametrize("cursor", ["", "%%%", "bm90IGpzb24", "WzFd"])
def test_a_cursor_the_server_did_not_make_is_refused(cursor):
    with pytest.raises(Unprocessable):
        decode_cursor(cursor)
