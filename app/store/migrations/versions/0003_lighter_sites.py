"""sites: no foreign key to measurements; WITHOUT ROWID on SQLite

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-01 22:50:00
"""

from collections.abc import Sequence

from alembic import op

revision: str = '0003'
down_revision: str | None = '0002'
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

FK = 'fk_sites_panel_measurement_id_measurements'


def upgrade() -> None:
    sqlite = op.get_bind().dialect.name == 'sqlite'
    # On SQLite the table is rebuilt so that the WITHOUT ROWID option takes effect.
    with op.batch_alter_table('sites', recreate='always' if sqlite else 'auto',
                              table_kwargs={'sqlite_with_rowid': False}) as batch_op:
        batch_op.drop_constraint(FK, type_='foreignkey')


def downgrade() -> None:
    sqlite = op.get_bind().dialect.name == 'sqlite'
    with op.batch_alter_table('sites', recreate='always' if sqlite else 'auto') as batch_op:
        batch_op.create_foreign_key(FK, 'measurements', ['panel', 'measurement_id'],
                                    ['panel', 'id'])
