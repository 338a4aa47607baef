"""Form fields derived from the record models: what a tablet form shows for each field.

A form never restates a field: its kind (text, number, whole number, choice, yes/no), its choices, its bounds
and its help text come from the pydantic model in ``schema/records``. What is decided here is only which fields
each kind of find asks for, in what order (the category first, then only what that category needs).
"""

from __future__ import annotations

import types
import typing
from dataclasses import dataclass
from typing import Any, Literal, get_args, get_origin

from pydantic import BaseModel

from . import vocab
from .records import Find, Sample, Unit

__all__ = ["FIND_FIELDS", "SAMPLE_FIELDS", "UNIT_FIELDS", "FormField", "coerce", "field_label", "find_form", "form_fields",
           "typed_values", "unit_form"]

Kind = Literal["text", "number", "integer", "choice", "flag"]


@dataclass(frozen=True)
class FormField:
    """One input on a form."""

    name: str
    label: str
    kind: Kind
    required: bool
    choices: tuple[str, ...] = ()
    help: str = ""
    minimum: float | None = None
    maximum: float | None = None


def _plain(annotation: Any) -> tuple[Any, bool, list[Any]]:
    """The bare type under ``Annotated[...]`` and ``| None``, whether None was allowed, and the constraints met."""
    optional, metadata = False, []
    while True:
        origin = get_origin(annotation)
        if origin is typing.Annotated:
            metadata += list(annotation.__metadata__)
            annotation = get_args(annotation)[0]
        elif origin in (typing.Union, types.UnionType):
            args = [a for a in get_args(annotation) if a is not type(None)]
            optional = optional or len(args) < len(get_args(annotation))
            if len(args) != 1:
                return annotation, optional, metadata
            annotation = args[0]
        else:
            return annotation, optional, metadata


_UNITS = {"mm": "mm", "g": "g", "l": "L", "deg": "deg", "m": "m", "m2": "m2", "z": "m"}


def _label(name: str) -> str:
    """``weight_g`` -> ``Weight (g)``; ``top_z`` -> ``Top z (m)``."""
    stem, _, unit = name.rpartition("_")
    if stem and unit in _UNITS:
        words = stem if unit != "z" else name
        return f"{words.replace('_', ' ').capitalize()} ({_UNITS[unit]})"
    return name.replace("_", " ").removesuffix(" id").capitalize()


def field_label(name: str) -> str:
    """A record field's label on a form and in messages (``void_reason`` -> ``Void reason``, ``weight_g`` ->
    ``Weight (g)``), from its name in the record model."""
    return _label(name)


def _bounds(metadata: list[Any]) -> tuple[float | None, float | None]:
    lo = hi = None
    for m in [x for m in metadata for x in (getattr(m, "metadata", None) or [m])]:
        for attr in ("gt", "ge"):
            lo = getattr(m, attr, None) if getattr(m, attr, None) is not None else lo
        for attr in ("lt", "le"):
            hi = getattr(m, attr, None) if getattr(m, attr, None) is not None else hi
    return lo, hi


def form_fields(model: type[BaseModel], names: tuple[str, ...], *, choices: dict[str, tuple[str, ...]] | None = None,
                ) -> list[FormField]:
    """Form fields for ``names`` of ``model``, in that order; ``choices`` overrides a field's choice list."""
    out = []
    for name in names:
        info = model.model_fields[name]
        annotation, optional, inner = _plain(info.annotation)
        given = (choices or {}).get(name)
        if given is not None or get_origin(annotation) is Literal:
            kind: Kind = "choice"
            options = tuple(given if given is not None else vocab.values(annotation))
        elif annotation is bool:
            kind, options = "flag", ()
        elif annotation is int:
            kind, options = "integer", ()
        elif annotation is float:
            kind, options = "number", ()
        else:
            kind, options = "text", ()
        lo, hi = _bounds([*info.metadata, *inner])
        out.append(FormField(
            name=name, label=_label(name), kind=kind,
            required=info.is_required() and not optional, choices=options, help=info.description or "",
            minimum=lo, maximum=hi,
        ))
    return out


# Which fields each kind of find asks for, after the category (position, unit and number are handled by the
# record screen itself). Common practice, no source: fossils carry taxon and element; elongated pieces their
# orientation; samples their purpose and container.
_COMMON = ("material", "count", "weight_g", "notes")
FIND_FIELDS: dict[str, tuple[str, ...]] = {
    "artifact": (*_COMMON[:2], "length_mm", "width_mm", "thickness_mm", "bearing_deg", "plunge_deg", *_COMMON[2:]),
    "fossil": ("material", "taxon", "element", "count", "length_mm", "bearing_deg", "plunge_deg", *_COMMON[2:]),
    "sample": ("material", "count", "notes"),
}
SAMPLE_FIELDS: tuple[str, ...] = ("purpose", "container", "volume_l", "mass_g", "oriented", "top_z", "bottom_z")
UNIT_FIELDS: tuple[str, ...] = ("code", "kind", "description", "munsell", "munsell_condition", "texture", "status")


def find_form(category: str) -> list[FormField]:
    """The fields a find of ``category`` asks for (sample details included for samples)."""
    if category not in FIND_FIELDS:
        raise ValueError(f"category {category!r} is not one of {', '.join(FIND_FIELDS)}")
    fields = form_fields(Find, FIND_FIELDS[category], choices={"material": vocab.materials_for(category)})
    if category == "sample":
        fields += form_fields(Sample, SAMPLE_FIELDS)
    return fields


def unit_form() -> list[FormField]:
    return form_fields(Unit, UNIT_FIELDS)


def coerce(field: FormField, text: str) -> Any:
    """A typed value from what was typed or chosen (``None`` for an empty optional field); the model then checks
    it and names the field if it is wrong."""
    text = text.strip()
    if text == "":
        return False if field.kind == "flag" else None
    if field.kind == "flag":
        return text.lower() in ("1", "yes", "true", "y", "on")
    if field.kind in ("number", "integer"):
        try:
            value = float(text.replace(",", "."))
        except ValueError:
            from .errors import FieldProblem, RecordInvalid

            raise RecordInvalid("form", [FieldProblem(field.name, f"{text!r} is not a number", "type digits only, "
                                                      "with a point for decimals")]) from None
        return int(value) if field.kind == "integer" and value.is_integer() else value
    return text


def typed_values(fields: list[FormField], values: dict[str, Any]) -> dict[str, Any]:
    """``values`` with each form string typed by its field (values already typed, and names the form does not
    have, pass unchanged: the model then judges them)."""
    by_name = {f.name: f for f in fields}
    return {k: coerce(by_name[k], v) if isinstance(v, str) and k in by_name else v for k, v in values.items()}
