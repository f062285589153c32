"""Alembic migrations of the results store: an empty database reaches head, and head is the models."""

from __future__ import annotations

from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import inspect

from fixture.store import current_revision, head_revision, make_engine, open_store, upgrade_to_head
from fixture.store.models import Base


def test_an_empty_database_migrates_to_head(db_url: str) -> None:
    engine = make_engine(db_url)
    try:
        # Alembic reports no revision for a database without alembic_version (Alembic docs, from memory).
        assert current_revision(engine) is None
        upgrade_to_head(engine)
        assert current_revision(engine) == head_revision()
        assert set(Base.metadata.tables) <= set(inspect(engine).get_table_names())
    finally:
        engine.dispose()


def test_migrated_schema_matches_the_models(db_url: str) -> None:
    # compare_metadata lists what autogenerate would emit to bring the database to the models;
    # empty means the shipped migrations build exactly the models' schema (Alembic autogenerate docs).
    with open_store(db_url) as store, store.engine.connect() as connection:
        context = MigrationContext.configure(connection, opts={"compare_type": True})
        assert compare_metadata(context, Base.metadata) == []


def test_opening_a_migrated_database_again_keeps_its_data(db_url: str) -> None:
    with open_store(db_url) as store:
        design_id = store.record_design("PW-22", "B", "x.toml", "0" * 64)
    with open_store(db_url) as store:
        assert current_revision(store.engine) == head_revision()
        assert store.record_design("PW-22", "B", "x.toml", "0" * 64) == design_id
