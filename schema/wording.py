"""What a person reads for a field name or a stored code, derived from their one source.

A record's field is shown by its form label (``schema.forms.field_label``, from the record model's field name), a
vocabulary code by its words (``schema.vocab.words``). ``in_words`` rewrites a sentence written for the record
(a model's or controller's ``FieldProblem``) so that the codes and field names it quotes read as the pickers
show them: only names the models and vocabularies hold are touched, never free text (a lab code, a file name).
``error_words`` is how a screen shows a refused record: the field's label first, then what is wrong and the fix.
"""

from __future__ import annotations

import re
from functools import lru_cache
from typing import Literal, get_origin

from . import vocab
from .errors import BaulkError, FieldProblem, RecordInvalid
from .forms import field_label

__all__ = ["count_words", "error_words", "field_label", "in_words", "problem_words"]

_NAME = re.compile(r"\b[a-z][a-z0-9]*(?:_[a-z0-9]+)+\b")  # snake_case: the shape of every field name and code


@lru_cache(maxsize=1)
def _known() -> frozenset[str]:
    """Every vocabulary code and every record field name with an underscore (the ones that read as jargon)."""
    from .records import REGISTRY

    codes = {c for v in vars(vocab).values() if get_origin(v) is Literal for c in vocab.values(v)}
    codes |= {m for ms in vocab.MATERIALS.values() for m in ms}
    fields = {n for spec in REGISTRY.values() for n in spec.model.model_fields}
    return frozenset(n for n in codes | fields if "_" in n)


def count_words(n: int, one: str, many: str | None = None) -> str:
    """``n`` and its noun in the right number: ``1 change``, ``3 changes``, ``0 changes`` (``many`` for a noun
    that takes more than an ``s``: ``count_words(2, "check is", "checks are")``)."""
    return f"{n} {one if n == 1 else (many or one + 's')}"


def in_words(text: str) -> str:
    """``text`` with each vocabulary code and field name it names in words (``tooth_enamel`` -> ``tooth
    enamel``, ``void_reason`` -> ``void reason``, ``unit_id`` -> ``unit``); anything else unchanged."""
    known = _known()
    return _NAME.sub(lambda m: vocab.words(m.group(0).removesuffix("_id")) if m.group(0) in known else m.group(0),
                     text)


def problem_words(problem: FieldProblem) -> str:
    """``Void reason: a voided find has no void reason. Fix: say why it was voided``."""
    return f"{field_label(problem.field)}: {in_words(problem.message)}. Fix: {in_words(problem.fix)}"


def error_words(exc: BaulkError) -> str:
    """A domain error as a screen shows it: a refused record with each field by its label and codes as words;
    any other error as it was written (its text already speaks to the person)."""
    if isinstance(exc, RecordInvalid):
        return f"{exc.record} refused, nothing was saved. " + "; ".join(problem_words(p) for p in exc.problems)
    return str(exc)
