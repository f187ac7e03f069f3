"""Dependencies injected into the routers: settings, a database session, the blob store."""

from collections.abc import Iterator
from typing import Annotated

from fastapi import Depends, Request
from sqlalchemy.orm import Session

from service.settings import Settings
from service.storage.blobs import BlobStore
from service.storage.db import Database


def get_settings(request: Request) -> Settings:
    return request.app.state.settings


def get_database(request: Request) -> Database:
    return request.app.state.database


def get_blobs(request: Request) -> BlobStore:
    return request.app.state.blobs


def get_session(database: Annotated[Database, Depends(get_database)]) -> Iterator[Session]:
    with database.session() as session:
        yield session


SettingsDep = Annotated[Settings, Depends(get_settings)]
# "function" scope commits before the answer is sent, so a client that got 201 can read what it made.
SessionDep = Annotated[Session, Depends(get_session, scope="function")]
BlobsDep = Annotated[BlobStore, Depends(get_blobs)]
