"""Gibbs draws and convergence diagnostics of models with the independent prior.

Revision ID: 0005
Revises: 0004
"""

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("models") as batch:
        batch.add_column(sa.Column("draws", sa.LargeBinary, nullable=True))
        batch.add_column(sa.Column("draws_meta", sa.JSON, nullable=True))
        batch.add_column(sa.Column("diagnostics", sa.JSON, nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("models") as batch:
        batch.drop_column("diagnostics")
        batch.drop_column("draws_meta")
        batch.drop_column("draws")
