"""Tablet file migration 0008: a find number clash arriving by sync stays visible.

The find table loses ``UNIQUE (site_id, number)`` (an index on the pair replaces it) so that two finds sharing
a number, pulled from two tablets, are both shown and listed as a ``duplicate_number`` conflict instead of one
being held back; the tablet still refuses a duplicate number on save. (device_id, number) is indexed too (the
highest number a device has used is asked at every sync), and ``ix_find_tally`` covers the per-horizon tallies.
Open conflicts gain their kind.

SQLite cannot drop a constraint, so the table is rebuilt: the file's own CREATE statement minus the constraint,
rows copied, old table dropped, new one renamed, indexes made again ("Making Other Kinds Of Table Schema
Changes" in the SQLite ALTER TABLE documentation). Foreign keys are deferred to the commit so the samples and
age determinations that refer to finds stay valid across the swap.
"""

from __future__ import annotations

from sqlalchemy.engine import Connection

NAME = "0008_number_clashes_visible"

_UNIQUE = "CONSTRAINT uq_find_site_id_number UNIQUE (site_id, number),"
_INDEXES = (
    "CREATE INDEX ix_find_site_id_number ON find (site_id, number)",
    "CREATE INDEX ix_find_device_id_number ON find (device_id, number)",
    "CREATE INDEX ix_find_unit_id ON find (unit_id)",
    "CREATE INDEX ix_find_trench_id ON find (trench_id)",
    "CREATE INDEX ix_find_category ON find (category)",
    "CREATE INDEX ix_find_found_at ON find (found_at)",
    "CREATE INDEX ix_find_tally ON find (unit_id, category, material, recovery, voided, count, weight_g)",
)


def apply(conn: Connection) -> None:
    ddl = conn.exec_driver_sql("SELECT sql FROM sqlite_master WHERE type = 'table' AND name = 'find'").scalar_one()
    if _UNIQUE not in ddl:
        raise RuntimeError("the find table has no (site_id, number) constraint to drop; the file is not a Baulk 0007 file")
    lines = [line for line in ddl.splitlines() if line.strip() != _UNIQUE]
    lines[0] = lines[0].replace("CREATE TABLE find (", "CREATE TABLE find_rebuilt (", 1)
    conn.exec_driver_sql("PRAGMA defer_foreign_keys = ON")
    conn.exec_driver_sql("\n".join(lines))
    conn.exec_driver_sql("INSERT INTO find_rebuilt SELECT * FROM find")
    conn.exec_driver_sql("DROP TABLE find")
    conn.exec_driver_sql("ALTER TABLE find_rebuilt RENAME TO find")
    for statement in _INDEXES:
        conn.exec_driver_sql(statement)
    conn.exec_driver_sql("ALTER TABLE open_conflict ADD COLUMN kind VARCHAR(20) DEFAULT 'concurrent' NOT NULL")
