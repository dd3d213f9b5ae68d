"""Initial schema: entries, element and tag membership, reflections.

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "entries",
        sa.Column("id", sa.Integer, primary_key=True, autoincrement=True),
        sa.Column("kind", sa.String(16), nullable=False),
        sa.Column("name", sa.String(300), nullable=False),
        sa.Column("mineral_name", sa.String(200)),
        sa.Column("formula", sa.String(300), nullable=False),
        sa.Column("formula_reduced", sa.String(300), nullable=False),
        sa.Column("space_group", sa.String(60)),
        sa.Column("sg_number", sa.Integer),
        sa.Column("a", sa.Float),
        sa.Column("b", sa.Float),
        sa.Column("c", sa.Float),
        sa.Column("alpha", sa.Float),
        sa.Column("beta", sa.Float),
        sa.Column("gamma", sa.Float),
        sa.Column("volume", sa.Float),
        sa.Column("z", sa.Float),
        sa.Column("density", sa.Float),
        sa.Column("wavelength", sa.Float),
        sa.Column("source", sa.String(100), nullable=False),
        sa.Column("source_id", sa.String(100)),
        sa.Column("doi", sa.String(300)),
        sa.Column("citation", sa.Text),
        sa.Column("licence", sa.Text),
        sa.Column("file_name", sa.String(500)),
        sa.Column("structure_text", sa.Text),
        sa.Column("content_hash", sa.String(64), nullable=False),
        sa.Column("created", sa.DateTime(timezone=False), nullable=False),
        sa.Column("notes", sa.Text, nullable=False),
        sa.UniqueConstraint("content_hash", name="uq_entries_content_hash"),
    )
    op.create_index("ix_entries_kind", "entries", ["kind"])
    op.create_index("ix_entries_formula_reduced", "entries", ["formula_reduced"])
    op.create_index("ix_entries_sg_number", "entries", ["sg_number"])
    op.create_index("ix_entries_source", "entries", ["source"])
    op.create_index("ix_entries_source_id", "entries", ["source_id"])
    op.create_table(
        "entry_elements",
        sa.Column(
            "entry_id",
            sa.Integer,
            sa.ForeignKey("entries.id", ondelete="CASCADE"),
            primary_key=True,
        ),
        sa.Column("element", sa.String(3), primary_key=True),
    )
    op.create_index("ix_entry_elements_element", "entry_elements", ["element", "entry_id"])
    op.create_table(
        "entry_tags",
        sa.Column(
            "entry_id",
            sa.Integer,
            sa.ForeignKey("entries.id", ondelete="CASCADE"),
            primary_key=True,
        ),
        sa.Column("tag", sa.String(64), primary_key=True),
    )
    op.create_table(
        "reflections",
        sa.Column(
            "entry_id",
            sa.Integer,
            sa.ForeignKey("entries.id", ondelete="CASCADE"),
            primary_key=True,
        ),
        sa.Column("seq", sa.Integer, primary_key=True),
        sa.Column("d", sa.Float, nullable=False),
        sa.Column("h", sa.Integer),
        sa.Column("k", sa.Integer),
        sa.Column("l", sa.Integer),
        sa.Column("multiplicity", sa.Integer),
        sa.Column("f2", sa.Float),
        sa.Column("intensity", sa.Float),
    )


def downgrade() -> None:
    op.drop_table("reflections")
    op.drop_table("entry_tags")
    op.drop_index("ix_entry_elements_element", table_name="entry_elements")
    op.drop_table("entry_elements")
    op.drop_table("entries")
