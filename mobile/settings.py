"""Tablet settings: where the store lives (environment variables start with ``BAULK_TABLET_``), and what the
tablet file itself remembers between starts: the instrument line template (``baulk tablet --template``)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING

import platformdirs
from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

if TYPE_CHECKING:
    from schema.survey.templates import Template

    from .store import TabletStore

__all__ = ["GNSS_MAX_AGE_S", "TEMPLATE_SETTING", "TabletSettings", "instrument_template", "remember_template"]

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
    download_max_move_m: float = Field(default=0.10, gt=0, le=10, allow_inf_nan=False,
                                       description="a point of the instrument's download that would move a find "
                                                   "further than this (m) is written only when the recorder "
                                                   "confirms it (as the server's --max-move)")


TEMPLATE_SETTING = "instrument.template"  # the tablet file's local setting (never synced) that holds it


def remember_template(store: "TabletStore", template: "Template") -> "Template":
    """Keep ``template`` in the tablet file as the one its instrument's lines are read with (the whole template,
    not its path: the file may be moved or edited afterwards without changing what the tablet reads)."""
    from schema.survey.templates import BUILT_IN, template_document

    if BUILT_IN.get(template.name) == template:
        value = json.dumps({"built_in": template.name})
    else:
        value = json.dumps({"source": template.source, "template": template_document(template)}, sort_keys=True)
    store.set_setting(TEMPLATE_SETTING, value)
    return template


def instrument_template(store: "TabletStore", chosen: "Template | None" = None) -> "Template":
    """The template the tablet reads its instrument with: ``chosen`` (``--template``), which is then remembered,
    else the one the tablet file remembers, else BKS (Baulk's own line)."""
    from schema.errors import TemplateInvalid
    from schema.survey.templates import BKS, parse_template, template_named

    if chosen is not None:
        return remember_template(store, chosen)
    value = store.setting(TEMPLATE_SETTING)
    if value is None:
        return BKS
    try:
        kept = json.loads(value)
        if "built_in" in kept:
            return template_named(kept["built_in"])
        return parse_template(kept["template"], source=kept["source"])
    except (ValueError, KeyError, TypeError, TemplateInvalid) as exc:
        raise TemplateInvalid(f"the instrument template this tablet file remembers cannot be read ({exc}); start "
                              "the tablet with --template FILE (or --template bks) to choose it again") from None
