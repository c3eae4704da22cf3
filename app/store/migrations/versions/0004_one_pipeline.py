"""one measurement pipeline: packed sites, genealogy, panel revision and completion, history
revision, typed estimate (empty stack is NULL)

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-04 21:10:00

Data: every measurement's site rows are packed into one ``measurement_sites`` row (the same
float64 values, in seq order), then ``sites`` is dropped; ``panels.completed_at`` is set for
panels that already have every layer of both sides in force.
"""

from collections.abc import Sequence

import numpy as np
import sqlalchemy as sa
from alembic import op

revision: str = '0004'
down_revision: str | None = '0003'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_BATCH = 20_000


def _pack_existing_sites() -> None:
    bind = op.get_bind()
    sites = sa.table(
        'sites', sa.column('measurement_id', sa.Uuid()), *(sa.column(c) for c in (
            'panel', 'seq', 'x_mm_posted', 'y_mm_posted', 'dx_um_posted',
            'dy_um_posted', 'x_mm', 'y_mm', 'dx_um', 'dy_um')))
    packed = sa.table('measurement_sites', sa.column('panel'),
                      sa.column('measurement_id', sa.Uuid()), sa.column('n_sites'),
                      sa.column('posted', sa.LargeBinary()),
                      sa.column('panel_frame', sa.LargeBinary()))
    rows = bind.execute(sa.select(sites).order_by(
        sites.c.panel, sites.c.measurement_id, sites.c.seq)).yield_per(_BATCH)
    out: list[dict[str, object]] = []
    key: tuple[object, object] | None = None
    values: list[tuple[float, ...]] = []

    def flush_one() -> None:
        a = np.asarray(values, dtype='<f8')
        out.append({'panel': key[0], 'measurement_id': key[1], 'n_sites': len(values),
                    'posted': a[:, 0:4].copy().tobytes(), 'panel_frame': a[:, 4:8].copy().tobytes()})

    for r in rows:
        k = (r.panel, r.measurement_id)
        if k != key and key is not None:
            flush_one()
            values = []
            if len(out) >= 1000:
                bind.execute(packed.insert(), out)
                out.clear()
        key = k
        values.append((r.x_mm_posted, r.y_mm_posted, r.dx_um_posted, r.dy_um_posted,
                       r.x_mm, r.y_mm, r.dx_um, r.dy_um))
    if key is not None:
        flush_one()
    if out:
        bind.execute(packed.insert(), out)


def upgrade() -> None:
    with op.batch_alter_table('products') as batch_op:
        batch_op.add_column(sa.Column('history_revision', sa.Integer(), server_default='0',
                                      nullable=False))
        batch_op.add_column(sa.Column('history_at', sa.DateTime(timezone=True), nullable=True))
    with op.batch_alter_table('panels') as batch_op:
        batch_op.add_column(sa.Column('revision', sa.Integer(), server_default='0',
                                      nullable=False))
        batch_op.add_column(sa.Column('completed_at', sa.DateTime(timezone=True), nullable=True))
    with op.batch_alter_table('measurements') as batch_op:
        for name in ('metrology_tool', 'recipe', 'artwork', 'shift'):
            batch_op.add_column(sa.Column(name, sa.String(length=64), nullable=True))
    with op.batch_alter_table('panel_states') as batch_op:
        batch_op.alter_column('stack', existing_type=sa.JSON(), nullable=True)
    op.execute("UPDATE panel_states SET stack = NULL WHERE CAST(stack AS TEXT) = '{}'")
    op.create_table(
        'measurement_sites',
        sa.Column('panel', sa.String(length=64), nullable=False),
        sa.Column('measurement_id', sa.Uuid(), nullable=False),
        sa.Column('n_sites', sa.Integer(), nullable=False),
        sa.Column('posted', sa.LargeBinary(), nullable=False),
        sa.Column('panel_frame', sa.LargeBinary(), nullable=False),
        sa.PrimaryKeyConstraint('panel', 'measurement_id', name=op.f('pk_measurement_sites')),
    )
    _pack_existing_sites()
    op.drop_table('sites')
    op.execute(
        "UPDATE panels SET completed_at = (SELECT max(m.received_at) FROM measurements m "
        "WHERE m.panel = panels.serial AND m.superseded_by IS NULL) "
        "WHERE (SELECT count(*) FROM measurements m WHERE m.panel = panels.serial "
        "AND m.superseded_by IS NULL) = 2 * (SELECT p.layers_per_side FROM products p "
        "WHERE p.id = panels.product_id)"
    )


def downgrade() -> None:
    raise NotImplementedError("0004 packs the site rows; restore from a backup to go back")
