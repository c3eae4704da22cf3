"""products: via and pad diameters and the via copper in place of the routed connection;
fits: leverage of the model over the check points (fit guard)

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-04 21:00:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = '0005'
down_revision: str | None = '0004'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

VIA_COLUMNS = ('via_diameter_um', 'pad_diameter_um', 'copper_thickness_um', 'pad_width_um',
               'via_depth_um', 'resistivity_ohm_m')


def upgrade() -> None:
    with op.batch_alter_table('fits') as batch_op:
        batch_op.add_column(sa.Column('leverage', sa.Double(), nullable=True))
    with op.batch_alter_table('products') as batch_op:
        for name in VIA_COLUMNS:
            batch_op.add_column(sa.Column(name, sa.Double(), nullable=True))
        batch_op.add_column(sa.Column('via_layers', sa.JSON(), nullable=True))
    # The routed connection's copper carries over (its thickness and resistivity); its length,
    # width and resistance limit belonged to the rule that is retired, and no via diameters
    # can be inferred from them.
    products = sa.table('products', sa.column('id', sa.Integer()),
                        sa.column('connection', sa.JSON()),
                        sa.column('copper_thickness_um', sa.Double()),
                        sa.column('resistivity_ohm_m', sa.Double()))
    bind = op.get_bind()
    for row in bind.execute(sa.select(products.c.id, products.c.connection)).all():
        if row.connection:
            bind.execute(products.update().where(products.c.id == row.id).values(
                copper_thickness_um=row.connection.get('thickness_um'),
                resistivity_ohm_m=row.connection.get('resistivity_ohm_m')))
    with op.batch_alter_table('products') as batch_op:
        batch_op.drop_column('connection')


def downgrade() -> None:
    with op.batch_alter_table('products') as batch_op:
        batch_op.add_column(sa.Column('connection', sa.JSON(), nullable=True))
        for name in (*VIA_COLUMNS, 'via_layers'):
            batch_op.drop_column(name)
    with op.batch_alter_table('fits') as batch_op:
        batch_op.drop_column('leverage')
