"""Tablet settings: where the store lives. Environment variables start with ``BAULK_TABLET_``."""

from __future__ import annotations

from pathlib import Path

import platformdirs
from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

__all__ = ["GNSS_MAX_AGE_S", "TabletSettings"]

GNSS_MAX_AGE_S = 60.0  # a fix older than this needs a fresh reading or a reason (a walk to the next find; our choice)


def _default_store() -> Path:
    return Path(platformdirs.user_data_dir("baulk", appauthor=False)) / "tablet.sqlite"


class TabletSettings(BaseSettings):
    """Settings of the tablet app; the store defaults to a file in the platform's user data folder."""

    model_config = SettingsConfigDict(env_prefix="BAULK_TABLET_", extra="forbid")

    store_path: Path = Field(default_factory=_default_store, description="the tablet's SQLite file")
    labels_dir: Path = Field(default_factory=lambda: _default_store().parent / "labels",
                             description="where bag-label sheets (PDF) are written")
    laser_class: str = Field(default="see the instrument's label", max_length=40,
                             description="the total station's laser class, shown with the instrument setup")
    gnss_max_age_s: float = Field(default=GNSS_MAX_AGE_S, gt=0, le=3600, allow_inf_nan=False,
                                  description="a GNSS fix older than this (seconds since the tablet received it) "
                                              "places a find only with a fresh reading or a reason")
