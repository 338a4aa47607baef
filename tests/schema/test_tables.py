"""Tables derived from the models: every field is a column, keys and constraints follow the markers."""

from __future__ import annotations


import pytest
import sqlalchemy as sa

from schema.records import REGISTRY
from schema.tables import build_metadata, metadata


@pytest.mark.parametrize("name", sorted(REGISTRY))
def test_every_field_is_a_column(name: str) -> None:
    spec = REGISTRY[name]
    table = metadata.tables[name]
    assert [c.name for c in table.columns][0] == "id"
    assert set(table.columns.keys()) == set(spec.model.model_fields)
    for fname, info in spec.model.model_fields.items():
        col = table.c[fname]
        assert col.nullable == (not info.is_required() and fname != "id" and _optional(info)), fname


def _optional(info) -> bool:  # type: ignore[no-untyped-def]
    import types
    import typing

    tp = info.annotation
    return typing.get_origin(tp) in (typing.Union, types.UnionType) and type(None) in typing.get_args(tp)


def test_foreign_keys_follow_ref_markers() -> None:
    fks = {(fk.parent.table.name, fk.parent.name, fk.column.table.name) for fk in _all_fks()}
    assert ("find", "unit_id", "unit") in fks
    assert ("unit", "horizon_id", "horizon") in fks
    assert ("sample", "find_id", "find") in fks
    assert ("number_block", "device_id", "device") in fks
    assert ("find", "device_id", "device") not in fks  # a tablet holds finds of devices it has never seen


def _all_fks():  # type: ignore[no-untyped-def]
    for t in metadata.tables.values():
        yield from t.foreign_keys


def test_unique_and_index_groups_from_spec() -> None:
    def uniques(name: str) -> set[tuple[str, ...]]:
        return {tuple(c.name for c in con.columns)
                for con in metadata.tables[name].constraints if isinstance(con, sa.UniqueConstraint)}

    assert ("find_id",) in uniques("sample")
    # find numbers are indexed, not unique: a clash arriving by sync must stay visible as a conflict
    assert ("site_id", "number") not in uniques("find")
    indexed = {tuple(c.name for c in ix.columns) for ix in metadata.tables["find"].indexes}
    assert ("site_id", "number") in indexed


def test_vocabulary_is_checked_by_the_database_too(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """A row written around the models (raw SQL) still cannot hold an unknown unit kind."""
    md = build_metadata()
    engine = sa.create_engine(f"sqlite:///{tmp_path / 'x.sqlite'}")
    md.create_all(engine)
    with pytest.raises(sa.exc.IntegrityError, match="CHECK constraint failed"):
        with engine.begin() as conn:
            conn.execute(sa.text(
                "INSERT INTO relation (id, site_id, upper_unit_id, lower_unit_id, kind, voided) "
                "VALUES ('a', 'b', 'c', 'd', 'overlaps', 0)"))
    engine.dispose()
