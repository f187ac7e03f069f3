"""API keys in storage: made with a role and a study, found by token, revoked, listed."""

import pytest

from service.storage import keys
from service.storage.ids import new_id
from service.storage.models import ApiKey, Study


@pytest.fixture()
def study_code(database) -> str:
    with database.session() as session:
        study = Study(id=new_id("st"), code="KEYS-1", title="t")
        session.add(study)
    return study.code


def test_a_created_key_is_found_by_its_token_and_stored_only_as_its_hash(database, study_code):
    with database.session() as session:
        created = keys.create_key(session, "read", study_code)
    with database.session() as session:
        found = keys.find_active_key(session, created.token)
        stored = session.get(ApiKey, created.info.id)
        assert found is not None and found.role == "read"
        assert stored.token_sha256 == keys.token_sha256(created.token) != created.token


def test_an_unknown_token_finds_no_key(database):
    with database.session() as session:
        assert keys.find_active_key(session, "ea_not-a-token") is None


def test_a_revoked_key_is_no_longer_found(database, study_code):
    with database.session() as session:
        created = keys.create_key(session, "write", study_code)
    with database.session() as session:
        keys.revoke_key(session, created.info.id)
    with database.session() as session:
        assert keys.find_active_key(session, created.token) is None
        assert [key.revoked_at is not None for key in keys.list_keys(session)] == [True]


def test_a_key_can_be_revoked_by_its_token(database):
    with database.session() as session:
        created = keys.create_key(session, "admin")
    with database.session() as session:
        assert keys.revoke_key(session, created.token).id == created.info.id


@pytest.mark.parametrize(
    ("role", "study", "needle"),
    [
        ("admin", "KEYS-1", "every study"),
        ("read", None, "--study"),
        ("write", "NOPE", "no study"),
        ("owner", None, "role must be"),
    ],
)
def test_a_key_that_cannot_exist_is_refused_with_the_reason(database, study_code, role, study, needle):
    with database.session() as session, pytest.raises(keys.KeyProblem, match=needle):
        keys.create_key(session, role, study)


def test_revoking_an_unknown_key_is_refused(database):
    with database.session() as session, pytest.raises(keys.KeyProblem):
        keys.revoke_key(session, "key_0000000000000000")


def test_a_label_too_long_for_its_column_is_refused_with_the_limit(database):
    with database.session() as session, pytest.raises(keys.KeyProblem, match="at most 200"):
        keys.create_key(session, "admin", label="x" * 201)
