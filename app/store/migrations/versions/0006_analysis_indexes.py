"""measurements: indexes for the FTB analysis (time window; tool over time)

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-04 21:15:00
"""

from collections.abc import Sequence

from alembic import op

revision: str = '0006'
down_revision: str | None = '0005'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_index('ix_measurements_time', 'measurements', ['measured_at'], unique=False)
    op.create_index('ix_measurements_tool_time', 'measurements', ['tool', 'measured_at'],
                    unique=False)


def downgrade() -> None:
    op.drop_index('ix_measurements_tool_time', table_name='measurements')
    op.drop_index('ix_measurements_time', table_name='measurements')
