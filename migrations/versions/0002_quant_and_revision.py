"""Cell mass and RIR for quantification, a revision counter for the library stamp, tag index.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01
"""

import sqlalchemy as sa
from alembic import op

revision = "0002"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("entries") as batch:
        batch.add_column(sa.Column("cell_mass", sa.Float))
        batch.add_column(sa.Column("rir", sa.Float))
        batch.add_column(sa.Column("revision", sa.Integer, nullable=False, server_default="1"))
    op.create_index("ix_entry_tags_tag", "entry_tags", ["tag", "entry_id"])


def downgrade() -> None:
    op.drop_index("ix_entry_tags_tag", table_name="entry_tags")
    with op.batch_alter_table("entries") as batch:
        batch.drop_column("revision")
        batch.drop_column("rir")
        batch.drop_column("cell_mass")
