"""backups of the store

``backup_log``: every backup ``baulk backup`` wrote of this store and verified (when, where, its size and
SHA-256); the camp Today page shows the newest and warns when it is old or missing.

Revision ID: 0013
Revises: 0012
Create Date: 2026-12-05 10:00:00
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa

import schema.tables

revision: str = '0013'
down_revision: Union[str, Sequence[str], None] = '0012'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    op.create_table('backup_log',
    sa.Column('id', sa.Uuid(), nullable=False),
    sa.Column('made_at', schema.tables.UTCDateTime(), nullable=False,
              comment='the moment of the snapshot the backup holds (UTC)'),
    sa.Column('path', sa.String(), nullable=False, comment='the backup file as written (absolute path)'),
    sa.Column('bytes', sa.BigInteger(), nullable=False),
    sa.Column('sha256', sa.String(length=64), nullable=False, comment='SHA-256 of the backup file'),
    sa.PrimaryKeyConstraint('id', name=op.f('pk_backup_log')),
    comment='Verified backups of this store'
    )
    with op.batch_alter_table('backup_log') as batch_op:
        batch_op.create_index(batch_op.f('ix_backup_log_made_at'), ['made_at'], unique=False)


def downgrade() -> None:
    with op.batch_alter_table('backup_log') as batch_op:
        batch_op.drop_index(batch_op.f('ix_backup_log_made_at'))
    op.drop_table('backup_log')
