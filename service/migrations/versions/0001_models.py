"""Stored models.

Revision ID: 0001
Revises:
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "models",
        sa.Column("id", sa.String(36), primary_key=True),
        sa.Column("tenant_id", sa.String(64), nullable=False, index=True),
        sa.Column("name", sa.String(200), nullable=True),
        sa.Column("status", sa.String(16), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("version", sa.Integer, nullable=False),
        sa.Column("settings", sa.JSON, nullable=False),
        sa.Column("data", sa.JSON, nullable=False),
        sa.Column("lags", sa.Integer, nullable=False),
        sa.Column("hyperparameters", sa.JSON, nullable=False),
        sa.Column("log_ml", sa.Float, nullable=True),
        sa.Column("posterior", sa.LargeBinary, nullable=False),
        sa.Column("posterior_meta", sa.JSON, nullable=False),
    )


def downgrade() -> None:
    op.drop_table("models")
