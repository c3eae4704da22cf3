"""one vocabulary: the uploader role, the exposure tool column, the facing-side frame, and
hold rules named for what they judge

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-05 00:00:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = '0008'
down_revision: str | None = '0007'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

#: Old hold-rule code -> new one (docs/glossary.md).
RULES = {
    'ftb_over_limit': 'current_ftb_over_limit',
    'ftb_near_limit': 'current_ftb_near_limit',
    'p_exceed_at_risk': 'forecast_at_risk',
    'p_exceed_watch': 'forecast_watch',
}


def _recode(mapping: dict[str, str]) -> None:
    for old, new in mapping.items():
        op.execute(sa.text("UPDATE holds SET rule = :new WHERE rule = :old")
                   .bindparams(old=old, new=new))
        op.execute(sa.text("UPDATE panel_states SET risk_rule = :new WHERE risk_rule = :old")
                   .bindparams(old=old, new=new))


def upgrade() -> None:
    op.drop_index('ix_measurements_tool_time', table_name='measurements')
    with op.batch_alter_table('measurements') as batch_op:
        batch_op.alter_column('tool', new_column_name='exposure_tool',
                              existing_type=sa.String(64), existing_nullable=False)
        batch_op.alter_column('frame', type_=sa.String(16), existing_type=sa.String(8),
                              existing_nullable=False)
    op.create_index('ix_measurements_exposure_tool_time', 'measurements',
                    ['exposure_tool', 'measured_at'], unique=False)
    op.execute("UPDATE measurements SET frame = 'facing_side' WHERE frame = 'tool'")
    op.execute("UPDATE api_keys SET role = 'uploader' WHERE role = 'tool'")
    _recode(RULES)


def downgrade() -> None:
    _recode({new: old for old, new in RULES.items()})
    op.execute("UPDATE api_keys SET role = 'tool' WHERE role = 'uploader'")
    op.execute("UPDATE measurements SET frame = 'tool' WHERE frame = 'facing_side'")
    op.drop_index('ix_measurements_exposure_tool_time', table_name='measurements')
    with op.batch_alter_table('measurements') as batch_op:
        batch_op.alter_column('frame', type_=sa.String(8), existing_type=sa.String(16),
                              existing_nullable=False)
        batch_op.alter_column('exposure_tool', new_column_name='tool',
                              existing_type=sa.String(64), existing_nullable=False)
    op.create_index('ix_measurements_tool_time', 'measurements', ['tool', 'measured_at'],
                    unique=False)
