"""find numbers clash visibly; open conflicts carry their kind

A find number clash arriving by sync or a season import must be shown and listed as a conflict, so the find
table's UNIQUE (site_id, number) becomes a plain index; (device_id, number) is indexed for the
highest number a device has used, asked at every push. On SQLite the table is rebuilt (batch mode) with the
foreign keys that point at finds deferred to the commit.

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-02 02:00:00
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa

revision: str = '0008'
down_revision: Union[str, Sequence[str], None] = '0007'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        op.execute("PRAGMA defer_foreign_keys = ON")
    with op.batch_alter_table('find', recreate='auto') as batch_op:
        batch_op.drop_constraint(op.f('uq_find_site_id_number'), type_='unique')
        batch_op.create_index(op.f('ix_find_site_id_number'), ['site_id', 'number'], unique=False)
        batch_op.create_index(op.f('ix_find_device_id_number'), ['device_id', 'number'], unique=False)
        batch_op.create_index('ix_find_tally', ['unit_id', 'category', 'material', 'recovery', 'voided', 'count',
                                                'weight_g'], unique=False)
    with op.batch_alter_table('open_conflict') as batch_op:
        batch_op.add_column(sa.Column('kind', sa.String(length=20), server_default='concurrent', nullable=False,
                                      comment='concurrent | void (edits the void did not see) | duplicate_number (finds sharing a number)'))


def downgrade() -> None:
    with op.batch_alter_table('open_conflict') as batch_op:
        batch_op.drop_column('kind')
    with op.batch_alter_table('find', recreate='auto') as batch_op:
        batch_op.drop_index(op.f('ix_find_site_id_number'))
        batch_op.drop_index(op.f('ix_find_device_id_number'))
        batch_op.drop_index('ix_find_tally')
        batch_op.create_unique_constraint(op.f('uq_find_site_id_number'), ['site_id', 'number'])
