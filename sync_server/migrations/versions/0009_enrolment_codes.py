"""one-time enrolment codes

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-02 02:10:00
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa

import schema.tables

revision: str = '0009'
down_revision: Union[str, Sequence[str], None] = '0008'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None


def upgrade() -> None:
    op.create_table('enrolment_code',
    sa.Column('code_hash', sa.String(length=64), nullable=False, comment='SHA-256 of the normalised code'),
    sa.Column('device_id', sa.Uuid(), nullable=False, comment='the device the code enrols (made when the code is)'),
    sa.Column('created_at', schema.tables.UTCDateTime(), nullable=False),
    sa.Column('expires_at', schema.tables.UTCDateTime(), nullable=False),
    sa.Column('used_at', schema.tables.UTCDateTime(), nullable=True),
    sa.Column('created_by', sa.String(), nullable=False, comment="who made it: a manager device's label, or 'console'"),
    sa.ForeignKeyConstraint(['device_id'], ['device.id'], name=op.f('fk_enrolment_code_device_id_device')),
    sa.PrimaryKeyConstraint('code_hash', name=op.f('pk_enrolment_code')),
    comment='One-time enrolment codes for new devices'
    )


def downgrade() -> None:
    op.drop_table('enrolment_code')
