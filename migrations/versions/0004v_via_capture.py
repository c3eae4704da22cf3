"""fits: leverage of the model over the check points (fit guard)

Revision ID: 0004v
Revises: 0003
Create Date: 2026-12-04 21:00:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = '0004v'
down_revision: str | None = '0003'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table('fits') as batch_op:
        batch_op.add_column(sa.Column('leverage', sa.Double(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table('fits') as batch_op:
        batch_op.drop_column('leverage')
