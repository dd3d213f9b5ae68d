"""SQLAlchemy 2 models of the reference library (typed ``Mapped`` columns).

The schema is created and changed only by the alembic migrations in ``migrations/``; these
models must describe the head revision exactly (a test compares them).
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import (
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    String,
    Text,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship


class Base(DeclarativeBase):
    pass


class Entry(Base):
    """One reference phase: computed from a structure, or measured on a standard."""

    __tablename__ = "entries"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    kind: Mapped[str] = mapped_column(String(16), index=True)
    name: Mapped[str] = mapped_column(String(300))
    mineral_name: Mapped[str | None] = mapped_column(String(200))
    formula: Mapped[str] = mapped_column(String(300))
    formula_reduced: Mapped[str] = mapped_column(String(300), index=True)
    space_group: Mapped[str | None] = mapped_column(String(60))
    sg_number: Mapped[int | None] = mapped_column(Integer, index=True)
    a: Mapped[float | None] = mapped_column(Float)
    b: Mapped[float | None] = mapped_column(Float)
    c: Mapped[float | None] = mapped_column(Float)
    alpha: Mapped[float | None] = mapped_column(Float)
    beta: Mapped[float | None] = mapped_column(Float)
    gamma: Mapped[float | None] = mapped_column(Float)
    volume: Mapped[float | None] = mapped_column(Float)
    z: Mapped[float | None] = mapped_column(Float)
    density: Mapped[float | None] = mapped_column(Float)
    wavelength: Mapped[float | None] = mapped_column(Float)
    source: Mapped[str] = mapped_column(String(100), index=True)
    source_id: Mapped[str | None] = mapped_column(String(100), index=True)
    doi: Mapped[str | None] = mapped_column(String(300))
    citation: Mapped[str | None] = mapped_column(Text)
    licence: Mapped[str | None] = mapped_column(Text)
    file_name: Mapped[str | None] = mapped_column(String(500))
    structure_text: Mapped[str | None] = mapped_column(Text)
    content_hash: Mapped[str] = mapped_column(String(64), unique=True)
    created: Mapped[datetime] = mapped_column(DateTime(timezone=False))
    notes: Mapped[str] = mapped_column(Text, default="")
    # Added in revision 0002 (quantification and the library stamp need them).
    cell_mass: Mapped[float | None] = mapped_column(Float)
    rir: Mapped[float | None] = mapped_column(Float)
    revision: Mapped[int] = mapped_column(Integer, default=1, server_default="1")

    elements: Mapped[list[EntryElement]] = relationship(
        back_populates="entry", cascade="all, delete-orphan", passive_deletes=True
    )
    tags: Mapped[list[EntryTag]] = relationship(
        back_populates="entry", cascade="all, delete-orphan", passive_deletes=True
    )
    reflections: Mapped[list[Reflection]] = relationship(
        back_populates="entry",
        cascade="all, delete-orphan",
        passive_deletes=True,
        order_by="Reflection.seq",
    )


class EntryElement(Base):
    """Element membership, so that element filters are indexed queries."""

    __tablename__ = "entry_elements"

    entry_id: Mapped[int] = mapped_column(
        ForeignKey("entries.id", ondelete="CASCADE"), primary_key=True
    )
    element: Mapped[str] = mapped_column(String(3), primary_key=True)
    entry: Mapped[Entry] = relationship(back_populates="elements")

    __table_args__ = (Index("ix_entry_elements_element", "element", "entry_id"),)


class EntryTag(Base):
    __tablename__ = "entry_tags"

    entry_id: Mapped[int] = mapped_column(
        ForeignKey("entries.id", ondelete="CASCADE"), primary_key=True
    )
    tag: Mapped[str] = mapped_column(String(64), primary_key=True)
    entry: Mapped[Entry] = relationship(back_populates="tags")

    __table_args__ = (Index("ix_entry_tags_tag", "tag", "entry_id"),)


class Reflection(Base):
    """One line of a reference pattern. ``seq`` orders lines by decreasing d."""

    __tablename__ = "reflections"

    entry_id: Mapped[int] = mapped_column(
        ForeignKey("entries.id", ondelete="CASCADE"), primary_key=True
    )
    seq: Mapped[int] = mapped_column(Integer, primary_key=True)
    d: Mapped[float] = mapped_column(Float)
    h: Mapped[int | None] = mapped_column(Integer)
    k: Mapped[int | None] = mapped_column(Integer)
    l: Mapped[int | None] = mapped_column(Integer)  # noqa: E741 - Miller index
    multiplicity: Mapped[int | None] = mapped_column(Integer)
    f2: Mapped[float | None] = mapped_column(Float)
    intensity: Mapped[float | None] = mapped_column(Float)
    entry: Mapped[Entry] = relationship(back_populates="reflections")
