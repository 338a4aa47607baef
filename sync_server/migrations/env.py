"""Alembic environment for the camp server's database (SQLite or PostgreSQL).

Run through ``sync_server.store.migrate(engine)``, which passes the connection in ``config.attributes``; no
alembic.ini is needed. SQLite uses batch mode so column changes work there too.
"""

from __future__ import annotations

from alembic import context

from sync_server.tables import server_metadata

config = context.config
connection = config.attributes.get("connection")
if connection is None:  # pragma: no cover - only when someone runs the alembic CLI by hand
    raise RuntimeError("run migrations through sync_server.store.migrate(engine), which supplies the connection")

context.configure(
    connection=connection,
    target_metadata=server_metadata,
    render_as_batch=connection.dialect.name == "sqlite",
    compare_type=True,
)
with context.begin_transaction():
    context.run_migrations()
