"""Migrations: revision 0002 fills in the pipeline names of runs that existed before it."""

import sqlalchemy as sa
from alembic import command

from service.storage.migrate import alembic_config


def test_upgrading_to_0002_lists_the_pipelines_of_existing_runs(empty_database_url):
    url = empty_database_url
    config = alembic_config(url)
    command.upgrade(config, "0001")
    engine = sa.create_engine(url)
    with engine.begin() as connection:
        connection.execute(sa.text("INSERT INTO studies VALUES ('st_1', 'OLD', 't', '2026-01-01 00:00:00')"))
        connection.execute(
            sa.text(
                "INSERT INTO runs VALUES ('run_1', 'st_1', :spec, 'succeeded', 1.0, NULL, '2026-01-01 00:00:00', NULL, NULL)"
            ),
            {"spec": '{"pipelines": [{"name": "raw", "steps": []}, {"name": "hp1", "steps": []}]}'},
        )
    command.upgrade(config, "0002")
    with engine.connect() as connection:
        rows = connection.execute(sa.text("SELECT run_id, position, name FROM run_pipelines ORDER BY position")).all()
    engine.dispose()
    assert [tuple(row) for row in rows] == [("run_1", 0, "raw"), ("run_1", 1, "hp1")]
