"""pending rows say what they wait for

``pending_row.waits_for`` (indexed): a missing parent ``<record>:<id>``, ``table:<record>``, ``schema:<n>`` or
``edit``, so a push retries only the pending rows whose wait is over. Rows already pending keep NULL and are
retried once, which gives them their wait.

Revision ID: 0012
Revises: 0011
Create Date: 2026-12-04 10:00:00
"""
from typing import Sequence, Union

from alembic import op
import sqlalchemy as sa

revision: str = '0012'
down_revision: Union[str, Sequence[str], None] = '0011'
branch_labels: Union[str, Sequence[str], None] = None
depends_on: Union[str, Sequence[str], None] = None

_COMMENT = ("what must happen first: '<record>:<id>' a missing parent row, 'table:<record>' a change to that table "
            "(a clash), 'schema:<n>' a Baulk that reads schema n, 'edit' a new value of this record; NULL: written "
            "by an older Baulk, retried once")


def upgrade() -> None:
    with op.batch_alter_table('pending_row') as batch_op:
        batch_op.add_column(sa.Column('waits_for', sa.String(length=120), nullable=True, comment=_COMMENT))
        batch_op.create_index(op.f('ix_pending_row_waits_for'), ['waits_for'], unique=False)


def downgrade() -> None:
    with op.batch_alter_table('pending_row') as batch_op:
        batch_op.drop_index(op.f('ix_pending_row_waits_for'))
        batch_op.drop_column('waits_for')
