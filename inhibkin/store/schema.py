"""The results store's tables (SQLAlchemy Core): one schema for SQLite and PostgreSQL.

* ``campaign`` — one row per written campaign version: name, version (1, 2, … for each
  re-write of a name), time written (UTC, ISO 8601), package version, options (JSON),
  free-text notes, number of compounds.
* ``campaign_input`` — the input files of a version: path as given, SHA-256, size.
* ``result`` — one row per compound of a version, the ranked table's figures that
  cross-campaign queries read (a compound's history, the MSR).
* ``stored_table`` / ``stored_row`` — every table of a version (ranking, parameters,
  comparisons, plates, and time_dependent when the campaign carried time-dependent
  compounds) exactly: column names and dtypes, then one JSON array per row.
  JSON numbers are written with Python's shortest round-trip ``repr``, so every float
  reads back to the bit (NaN and ±inf included).
"""

from __future__ import annotations

from sqlalchemy import (
                        Column,
                        Float,
                        ForeignKey,
                        Integer,
                        MetaData,
                        String,
                        Table,
                        Text,
                        UniqueConstraint,
)

__all__ = ["METADATA", "CAMPAIGN", "CAMPAIGN_INPUT", "RESULT", "STORED_TABLE", "STORED_ROW",
           "SCHEMA_VERSION"]

#: Bumped when the tables change; kept in every campaign row.
SCHEMA_VERSION = 1

METADATA = MetaData()

CAMPAIGN = Table(
    "campaign", METADATA,
    Column("id", Integer, primary_key=True, autoincrement=True),
    Column("name", String(200), nullable=False),
    Column("version", Integer, nullable=False),
    Column("created_utc", String(40), nullable=False),
    Column("package_version", String(40), nullable=False),
    Column("schema_version", Integer, nullable=False),
    Column("options", Text, nullable=False),
    Column("notes", Text, nullable=False),
    Column("n_compounds", Integer, nullable=False),
    UniqueConstraint("name", "version", name="campaign_name_version"),
)

CAMPAIGN_INPUT = Table(
    "campaign_input", METADATA,
    Column("campaign_id", Integer, ForeignKey("campaign.id"), primary_key=True),
    Column("position", Integer, primary_key=True),
    Column("path", Text, nullable=False),
    Column("sha256", String(64), nullable=False),
    Column("n_bytes", Integer, nullable=False),
)

RESULT = Table(
    "result", METADATA,
    Column("campaign_id", Integer, ForeignKey("campaign.id"), primary_key=True),
    Column("position", Integer, primary_key=True),
    Column("compound", Text, nullable=False, index=True),
    Column("status", String(20)),
    Column("verdict", Text),
    Column("mechanism", Text),
    Column("ki_M", Float(53)),
    Column("pki", Float(53)),
    Column("pki_low", Float(53)),
    Column("pki_high", Float(53)),
    Column("ic50_M", Float(53)),
    Column("pic50", Float(53)),
    Column("hill", Float(53)),
    Column("flags", Text),
)

STORED_TABLE = Table(
    "stored_table", METADATA,
    Column("campaign_id", Integer, ForeignKey("campaign.id"), primary_key=True),
    Column("name", String(40), primary_key=True),
    Column("columns", Text, nullable=False),
)

STORED_ROW = Table(
    "stored_row", METADATA,
    Column("campaign_id", Integer, ForeignKey("campaign.id"), primary_key=True),
    Column("table_name", String(40), primary_key=True),
    Column("position", Integer, primary_key=True),
    Column("cells", Text, nullable=False),
)
