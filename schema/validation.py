"""Turn model validation into errors a person can act on.

``check(model, data)`` validates and, on failure, raises ``RecordInvalid`` listing each bad field with what is
wrong, the value given and the fix. Cross-field validators in the models raise ``FieldError`` so that they, too,
name the field they are about.
"""

from __future__ import annotations

from typing import Annotated, Any, TypeVar, get_args, get_origin

from pydantic import BaseModel, ValidationError
from pydantic.fields import FieldInfo

from .errors import FieldProblem, RecordInvalid

__all__ = ["FieldError", "check", "field_problem", "problems"]

M = TypeVar("M", bound=BaseModel)


class FieldError(ValueError):
    """Raised inside a model validator: names the field, the problem and the fix."""

    def __init__(self, field: str, message: str, fix: str):
        self.field, self.message, self.fix = field, message, fix
        super().__init__(f"{message}; {fix}")


def _inner_infos(tp: Any) -> list[FieldInfo]:
    """FieldInfos hidden inside ``Optional[Annotated[...]]`` and similar."""
    found: list[FieldInfo] = []
    for arg in get_args(tp):
        if get_origin(arg) is Annotated:
            found.extend(m for m in get_args(arg)[1:] if isinstance(m, FieldInfo))
        found.extend(_inner_infos(arg))
    return found


def _field_hint(model: type[BaseModel], name: str) -> str:
    info = model.model_fields.get(name)
    if info is None:
        return ""
    infos = [info, *_inner_infos(info.annotation)]
    desc = next((i.description for i in infos if i.description), name.replace("_", " "))
    example = next((i.examples[0] for i in infos if i.examples), None)
    return f"{desc}, e.g. {example!r}" if example is not None else desc


def _fix_for(model: type[BaseModel], err: Any, top: str) -> str:
    kind = err["type"]
    if kind == "extra_forbidden":
        known = ", ".join(model.model_fields)
        return f"remove it; the fields of this record are: {known}"
    if kind == "missing":
        return f"add it: {_field_hint(model, top)}"
    if kind == "literal_error":
        return f"use one of: {err['ctx']['expected']}"
    hint = _field_hint(model, top)
    return f"give {hint}" if hint else "correct the value"


def _describe(err: Any) -> str:
    msg = err["msg"]
    if err["type"] in ("missing",):
        return "is required"
    given = err.get("input")
    if err["type"] == "extra_forbidden":
        return "is not a field of this record"
    return f"{msg[0].lower()}{msg[1:]} (got {given!r})"


def problems(model: type[BaseModel], exc: ValidationError) -> list[FieldProblem]:
    """One ``FieldProblem`` per pydantic error, each naming its field and a fix."""
    out: list[FieldProblem] = []
    for err in exc.errors():
        cause = (err.get("ctx") or {}).get("error")
        if isinstance(cause, FieldError):
            out.append(FieldProblem(cause.field, cause.message, cause.fix))
            continue
        loc = [str(p) for p in err["loc"]]
        top = loc[0] if loc else "(record)"
        field = ".".join(loc) if loc else "(record)"
        if cause is not None and err["type"] == "value_error":
            text = str(cause)
            message, _, fix = text.partition("; ")
            out.append(FieldProblem(field, message, fix or _fix_for(model, err, top)))
            continue
        out.append(FieldProblem(field, _describe(err), _fix_for(model, err, top)))
    return out


def field_problem(model: type[BaseModel], field: str, exc: Exception) -> FieldProblem:
    """The first problem of one field's value validated on its own (e.g. a synced version's value), named as that
    field, with the value shown short (a 5,000-character note is not quoted whole)."""
    errors = exc.errors() if isinstance(exc, ValidationError) else []
    if not errors:
        return FieldProblem(field, str(exc).splitlines()[0], _fix_for(model, {"type": "value_error"}, field))
    err = errors[0]
    cause = (err.get("ctx") or {}).get("error")
    if isinstance(cause, FieldError):
        return FieldProblem(field, cause.message, cause.fix)
    msg = err["msg"]
    return FieldProblem(field, f"{msg[0].lower()}{msg[1:]} (got {_short(err.get('input'))})",
                        _value_fix(model, err, field))


def _value_fix(model: type[BaseModel], err: Any, field: str) -> str:
    ctx = err.get("ctx") or {}
    if err["type"] == "string_too_long":
        return f"shorten it to at most {ctx['max_length']} characters"
    if err["type"].startswith("uuid"):
        name = field.removesuffix("_id").replace("_", " ")
        return f"choose the {name} again (the value must be the id of a {name})"
    if "le" in ctx or "ge" in ctx:
        hint = _field_hint(model, field)
        bounds = " and ".join(x for x in (f"at least {ctx['ge']}" if "ge" in ctx else "",
                                          f"at most {ctx['le']}" if "le" in ctx else "") if x)
        return f"give {hint}, {bounds}"
    return _fix_for(model, err, field)


def _short(value: Any, limit: int = 60) -> str:
    shown = repr(value)
    if len(shown) <= limit:
        return shown
    size = f", {len(value)} characters" if isinstance(value, str) else ""
    return f"{shown[:limit - 3]}...{size}"


def check(model: type[M], data: Any, *, context: dict[str, Any] | None = None, record: str | None = None) -> M:
    """Validate ``data`` as ``model`` or raise ``RecordInvalid`` naming every bad field."""
    try:
        if isinstance(data, model):
            data = data.model_dump()
        return model.model_validate(data, context=context)
    except ValidationError as exc:
        name = record or getattr(model, "record_name", "") or model.__name__
        raise RecordInvalid(name, _with_choices(model, data, problems(model, exc))) from None


def _with_choices(model: type[BaseModel], data: Any, found: list[FieldProblem]) -> list[FieldProblem]:
    """A missing field whose allowed values depend on another field (a find's material on its category) is
    fixed with that list, not with the field's generic example (which may not be allowed here)."""
    allowed_for = getattr(model, "allowed_values", None)
    if allowed_for is None or not isinstance(data, dict):
        return found
    out = []
    for p in found:
        allowed = allowed_for(p.field, data) if p.message == "is required" else None
        out.append(FieldProblem(p.field, p.message, f"add it: use one of: {', '.join(allowed)}") if allowed else p)
    return out
