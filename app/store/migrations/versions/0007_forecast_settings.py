"""products: hysteresis thresholds of the risk levels (p_watch_leave, p_at_risk_leave)

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-04 22:00:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = '0007'
down_revision: str | None = '0006'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    # Server defaults, so that existing products get the documented defaults.
    with op.batch_alter_table('products') as batch_op:
        batch_op.add_column(sa.Column('p_watch_leave', sa.Float(), nullable=False,
                                      server_default=sa.text('0.02')))
        batch_op.add_column(sa.Column('p_at_risk_leave', sa.Float(), nullable=False,
                                      server_default=sa.text('0.1')))


def downgrade() -> None:
    with op.batch_alter_table('products') as batch_op:
        batch_op.drop_column('p_at_risk_leave')
        batch_op.drop_column('p_watch_leave')
