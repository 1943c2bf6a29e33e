"""What routes get from the app, as ``Annotated`` dependencies: the engine, the store, the settings."""
from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request

from ..engine import Engine
from ..settings import Settings
from ..store import StoreBackend


def get_engine(request: Request) -> Engine:
    """The app's analysis engine (``app.state.engine``)."""
    return request.app.state.engine


def get_store(request: Request) -> StoreBackend:
    """The app's store of datasets and snapshots (``app.state.store``)."""
    return request.app.state.store


def get_settings(request: Request) -> Settings:
    """The server settings the app was created with (``app.state.settings``)."""
    return request.app.state.settings


EngineDep = Annotated[Engine, Depends(get_engine)]
StoreDep = Annotated[StoreBackend, Depends(get_store)]
SettingsDep = Annotated[Settings, Depends(get_settings)]
