"""The results store: campaigns written with their provenance, read back across campaigns.

:class:`ResultStore` opens an SQLite file (the default: no server, one file to copy or
archive) or a PostgreSQL database given a ``postgresql://`` URL, through SQLAlchemy.

Writes
------
:meth:`ResultStore.write` puts one campaign in one transaction: the campaign row, its
input files' SHA-256, the per-compound results and every table. Any failure rolls the
whole write back, so an interrupted write leaves the store as it was. Re-writing a
campaign name adds a new *version* (1, 2, …; the older ones stay), or is refused with
``on_existing="refuse"``. Concurrent writers are safe: on SQLite each write takes the
database's write lock when it begins (``BEGIN IMMEDIATE``, waiting up to
:data:`SQLITE_BUSY_SECONDS`), on PostgreSQL a clash on (name, version) is retried.

Reads
-----
:meth:`~ResultStore.campaigns`, :meth:`~ResultStore.provenance`,
:meth:`~ResultStore.campaign_table` (a stored table, exactly as written: column
names, dtypes and every float to the bit), :meth:`~ResultStore.history` (one compound
across campaigns), :meth:`~ResultStore.results` and :meth:`~ResultStore.msr` (the
minimum significant ratio, :mod:`inhibkin.store.msr`).
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError, InhibkinError, Problem
from ..inputs.io import plain_scalar
from .msr import minimum_significant_ratio

try:
    from .schema import (
        CAMPAIGN,
        CAMPAIGN_INPUT,
        METADATA,
        RESULT,
        SCHEMA_VERSION,
        STORED_ROW,
        STORED_TABLE,
    )
except ImportError:  # SQLAlchemy is the optional 'store' extra; ResultStore says so
    METADATA = None

__all__ = ["ResultStore", "StoredCampaign", "StoreError", "write_campaign", "TABLES",
           "SQLITE_BUSY_SECONDS"]

#: The tables kept for each campaign (``time_dependent``: the time-dependent compounds'
#: own ranked table, kept when the campaign carries one, see ``Campaign.time_dependent``).
TABLES = ("ranking", "parameters", "comparisons", "plates", "time_dependent")
#: How long an SQLite writer waits for another writer's lock before giving up.
SQLITE_BUSY_SECONDS = 60.0
# Attempts at a PostgreSQL write whose (name, version) another writer took meanwhile.
_WRITE_ATTEMPTS = 5
_RESULT_COLUMNS = ("compound", "status", "verdict", "mechanism", "ki_M", "pki", "pki_low",
                   "pki_high", "ic50_M", "pic50", "hill", "flags")
_HASH_CHUNK = 1 << 20


class StoreError(InhibkinError):
    """The results store cannot be opened, or holds no such campaign."""


@dataclass(frozen=True)
class StoredCampaign:
    """What :meth:`ResultStore.write` wrote: campaign name, version, row id, time (UTC)."""

    name: str
    version: int
    id: int
    created_utc: str


def _package_version() -> str:
    try:
        return metadata.version("inhibkin")
    except metadata.PackageNotFoundError:
        return "unknown"


def file_digest(path) -> tuple[str, int]:
    """SHA-256 (hex) and size in bytes of a file."""
    digest, size = hashlib.sha256(), 0
    with open(path, "rb") as handle:
        for chunk in iter(lambda: handle.read(_HASH_CHUNK), b""):
            digest.update(chunk)
            size += len(chunk)
    return digest.hexdigest(), size


def _cell(value):
    """A table cell as a JSON value; floats stay exact (json writes repr)."""
    value = plain_scalar(value)
    if isinstance(value, (pd.Timestamp, datetime)):
        return value.isoformat()
    if value is None or isinstance(value, (bool, int, float, str, list, dict)):
        return value
    return str(value)


def _encode_table(table: pd.DataFrame) -> tuple[str, list[str]]:
    columns = json.dumps([[str(c), str(table[c].dtype)] for c in table.columns])
    rows = [json.dumps([_cell(v) for v in row], allow_nan=True)
            for row in table.itertuples(index=False, name=None)]
    return columns, rows


def _decode_table(columns_json: str, rows: list[str]) -> pd.DataFrame:
    columns = json.loads(columns_json)
    names = [name for name, _ in columns]
    values = [json.loads(r) for r in rows]
    frame = pd.DataFrame(values if values else None, columns=names, dtype=object)
    out = {}
    for name, dtype in columns:
        series = frame[name]
        try:
            if dtype.startswith("datetime64"):
                series = pd.to_datetime(series)
            elif dtype in ("float64", "float32"):
                series = series.astype(float).astype(dtype)
            else:
                series = series.astype(dtype)
        except (TypeError, ValueError):
            pass  # an object column of mixed values stays as the JSON gave it
        out[name] = series
    return pd.DataFrame(out, columns=names)


def _campaign_tables(campaign) -> dict:
    """The campaign's tables to keep (see :data:`TABLES`)."""
    comparisons = []
    for compound, fit in campaign.fits.items():
        frame = fit.comparison.reset_index()
        frame.insert(0, "compound", compound)
        comparisons.append(frame)
    tables = {"ranking": campaign.ranking,
              "parameters": campaign.parameters(),
              "comparisons": (pd.concat(comparisons, ignore_index=True) if comparisons
                              else pd.DataFrame(columns=["compound", "model"])),
              "plates": campaign.plates}
    time_dependent = getattr(campaign, "time_dependent", None)
    if time_dependent is not None:
        tables["time_dependent"] = time_dependent.table
    return tables


def _float_or_none(value):
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def _result_rows(campaign_id, ranking):
    rows = []
    for position, record in enumerate(ranking.to_dict("records")):
        row = {"campaign_id": campaign_id, "position": position,
               "compound": str(record["compound"])}
        for column in _RESULT_COLUMNS[1:]:
            value = record.get(column)
            if column in ("status", "verdict", "mechanism", "flags"):
                row[column] = None if value is None or value is pd.NA or (
                    isinstance(value, float) and math.isnan(value)) else str(value)
            else:
                row[column] = _float_or_none(value)
        rows.append(row)
    return rows


def _url(target) -> str:
    text = str(target)
    if "://" not in text:
        return f"sqlite:///{Path(text).resolve()}"
    if text.startswith("postgresql://") or text.startswith("postgres://"):
        # SQLAlchemy's default PostgreSQL driver is psycopg2; inhibkin's extra is psycopg 3.
        return "postgresql+psycopg://" + text.split("://", 1)[1]
    return text


class ResultStore:
    """A results store (SQLite file or PostgreSQL URL); use it as a context manager.

    Parameters
    ----------
    target : str or os.PathLike
        A file path (SQLite, created when missing if ``create``) or an SQLAlchemy URL
        (``postgresql://user@host/db``; ``sqlite:///file``).
    create : bool
        Whether a missing SQLite file may be created (reads pass False).
    """

    def __init__(self, target, *, create=True):
        try:
            from sqlalchemy import create_engine, event
            if METADATA is None:
                raise ImportError("sqlalchemy")
        except ImportError:
            raise StoreError("the results store needs SQLAlchemy: pip install "
                             "'inhibkin[store]'") from None
        self.target = str(target)
        url = _url(target)
        if url.startswith("sqlite:///") and not create:
            path = Path(url[len("sqlite:///"):])
            if not path.is_file():
                raise StoreError(f"no results store at {str(path)!r}")
        try:
            if url.startswith("sqlite"):
                self._engine = create_engine(url, connect_args={"timeout": SQLITE_BUSY_SECONDS})

                @event.listens_for(self._engine, "connect")
                def _own_transactions(dbapi_connection, _record):
                    # Let SQLAlchemy's "begin" event issue BEGIN IMMEDIATE itself.
                    dbapi_connection.isolation_level = None

                @event.listens_for(self._engine, "begin")
                def _write_lock(connection):
                    connection.exec_driver_sql("BEGIN IMMEDIATE")
            else:
                self._engine = create_engine(url)
            METADATA.create_all(self._engine)
        except ImportError as err:
            raise StoreError(f"the database driver is missing ({err}); for PostgreSQL: pip "
                             f"install 'inhibkin[postgresql]'") from None
        except Exception as err:  # the drivers' own errors: a store that cannot be opened
            raise StoreError(f"cannot open the results store {self.target!r}: "
                             f"{type(err).__name__}: {str(err).strip()[:300]}") from None

    def close(self) -> None:
        self._engine.dispose()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # ------------------------------------------------------------ writing

    def write(self, campaign, *, name, inputs=(), notes="", options=None,
              on_existing="version") -> StoredCampaign:
        """Write a campaign, with its provenance, in one transaction.

        Parameters
        ----------
        campaign : inhibkin.Campaign
        name : str
            The campaign's name.
        inputs : sequence of path
            The input files; each is kept with its SHA-256 and size.
        notes : str
            Free-text assay description.
        options : dict, optional
            The options of the run (default ``campaign.options``); kept as JSON.
        on_existing : {"version", "refuse"}
            What a name already in the store gets: a new version, or a refusal.

        Returns
        -------
        StoredCampaign
        """
        from sqlalchemy import exc, func, insert, select

        if on_existing not in ("version", "refuse"):
            raise DataError(Problem("on_existing", None, on_existing,
                                    "use 'version' or 'refuse'"))
        if not str(name).strip():
            raise DataError(Problem("name", None, name, "a campaign needs a name"))
        digests = [(str(p), *file_digest(p)) for p in inputs]
        tables = {key: _encode_table(table) for key, table in _campaign_tables(campaign).items()}
        options_json = json.dumps({**dict(campaign.options), **dict(options or {})},
                                  default=str, sort_keys=True)
        for attempt in range(_WRITE_ATTEMPTS):
            created = datetime.now(timezone.utc).isoformat()
            try:
                with self._engine.begin() as connection:
                    latest = connection.execute(select(func.max(CAMPAIGN.c.version)).where(
                        CAMPAIGN.c.name == name)).scalar()
                    if latest is not None and on_existing == "refuse":
                        raise StoreError(f"campaign {name!r} is already in the store "
                                         f"(version {latest}); choose another name or "
                                         f"write a new version")
                    version = (latest or 0) + 1
                    campaign_id = connection.execute(insert(CAMPAIGN).values(
                        name=name, version=version, created_utc=created,
                        package_version=_package_version(), schema_version=SCHEMA_VERSION,
                        options=options_json, notes=str(notes),
                        n_compounds=len(campaign.ranking))).inserted_primary_key[0]
                    if digests:
                        connection.execute(insert(CAMPAIGN_INPUT), [
                            {"campaign_id": campaign_id, "position": k, "path": path,
                             "sha256": digest, "n_bytes": size}
                            for k, (path, digest, size) in enumerate(digests)])
                    if len(campaign.ranking):
                        connection.execute(insert(RESULT),
                                           _result_rows(campaign_id, campaign.ranking))
                    for key, (columns, rows) in tables.items():
                        self._write_table(connection, campaign_id, key, columns, rows)
                return StoredCampaign(name, version, int(campaign_id), created)
            except exc.IntegrityError:
                if attempt == _WRITE_ATTEMPTS - 1:
                    raise StoreError(f"could not allocate a version of campaign {name!r}: "
                                     f"other writers kept taking it") from None
        raise AssertionError("unreachable")

    @staticmethod
    def _write_table(connection, campaign_id, key, columns, rows) -> None:
        from sqlalchemy import insert

        connection.execute(insert(STORED_TABLE).values(campaign_id=campaign_id, name=key,
                                                       columns=columns))
        if rows:
            connection.execute(insert(STORED_ROW), [
                {"campaign_id": campaign_id, "table_name": key, "position": k, "cells": r}
                for k, r in enumerate(rows)])

    # ------------------------------------------------------------ reading

    def _campaign_id(self, connection, name, version):
        from sqlalchemy import func, select

        if version is None:
            version = connection.execute(select(func.max(CAMPAIGN.c.version)).where(
                CAMPAIGN.c.name == name)).scalar()
        row = connection.execute(select(CAMPAIGN.c.id).where(
            CAMPAIGN.c.name == name, CAMPAIGN.c.version == version)).first() if (
            version is not None) else None
        if row is None:
            raise StoreError(f"no campaign {name!r}" + (f" version {version}" if version
                                                        else "") + " in the store")
        return row[0]

    def campaigns(self) -> pd.DataFrame:
        """Every campaign version: name, version, created_utc, package_version,
        n_compounds, n_inputs, notes."""
        from sqlalchemy import func, select

        n_inputs = (select(CAMPAIGN_INPUT.c.campaign_id,
                           func.count().label("n_inputs"))
                    .group_by(CAMPAIGN_INPUT.c.campaign_id).subquery())
        query = (select(CAMPAIGN.c.name, CAMPAIGN.c.version, CAMPAIGN.c.created_utc,
                        CAMPAIGN.c.package_version, CAMPAIGN.c.n_compounds,
                        func.coalesce(n_inputs.c.n_inputs, 0).label("n_inputs"),
                        CAMPAIGN.c.notes)
                 .select_from(CAMPAIGN.outerjoin(n_inputs,
                                                 n_inputs.c.campaign_id == CAMPAIGN.c.id))
                 .order_by(CAMPAIGN.c.id))
        with self._engine.connect() as connection:
            rows = connection.execute(query).all()
        return pd.DataFrame(rows, columns=["name", "version", "created_utc", "package_version",
                                           "n_compounds", "n_inputs", "notes"])

    def provenance(self, name, *, version=None) -> dict:
        """name, version, created_utc, package_version, options (dict), notes, inputs
        (list of {path, sha256, n_bytes})."""
        from sqlalchemy import select

        with self._engine.connect() as connection:
            campaign_id = self._campaign_id(connection, name, version)
            row = connection.execute(select(CAMPAIGN).where(CAMPAIGN.c.id == campaign_id)).one()
            inputs = connection.execute(
                select(CAMPAIGN_INPUT.c.path, CAMPAIGN_INPUT.c.sha256, CAMPAIGN_INPUT.c.n_bytes)
                .where(CAMPAIGN_INPUT.c.campaign_id == campaign_id)
                .order_by(CAMPAIGN_INPUT.c.position)).all()
        record = dict(row._mapping)
        record["options"] = json.loads(record["options"])
        record["inputs"] = [dict(r._mapping) for r in inputs]
        return record

    def campaign_table(self, name, table="ranking", *, version=None) -> pd.DataFrame:
        """One of the campaign's tables (:data:`TABLES`), exactly as written.

        Raises
        ------
        StoreError
            No such campaign, or it holds no such table (``time_dependent`` is kept only
            for a campaign that carried time-dependent compounds).
        """
        from sqlalchemy import select

        if table not in TABLES:
            raise DataError(Problem("table", None, table, f"use one of {', '.join(TABLES)}"))
        with self._engine.connect() as connection:
            campaign_id = self._campaign_id(connection, name, version)
            columns = connection.execute(select(STORED_TABLE.c.columns).where(
                STORED_TABLE.c.campaign_id == campaign_id,
                STORED_TABLE.c.name == table)).scalar_one_or_none()
            if columns is None:
                raise StoreError(f"campaign {name!r} holds no {table!r} table")
            rows = connection.execute(select(STORED_ROW.c.cells).where(
                STORED_ROW.c.campaign_id == campaign_id, STORED_ROW.c.table_name == table)
                .order_by(STORED_ROW.c.position)).scalars().all()
        return _decode_table(columns, list(rows))

    def results(self, *, all_versions=False) -> pd.DataFrame:
        """Every compound of every campaign (the latest version of each unless
        ``all_versions``): campaign, version, created_utc and the result columns."""
        from sqlalchemy import func, select

        query = (select(CAMPAIGN.c.name.label("campaign"), CAMPAIGN.c.version,
                        CAMPAIGN.c.created_utc, *[RESULT.c[c] for c in _RESULT_COLUMNS])
                 .select_from(RESULT.join(CAMPAIGN, RESULT.c.campaign_id == CAMPAIGN.c.id))
                 .order_by(CAMPAIGN.c.id, RESULT.c.position))
        if not all_versions:
            latest = (select(CAMPAIGN.c.name, func.max(CAMPAIGN.c.version).label("latest"))
                      .group_by(CAMPAIGN.c.name).subquery())
            query = query.join(latest, (latest.c.name == CAMPAIGN.c.name)
                               & (latest.c.latest == CAMPAIGN.c.version))
        with self._engine.connect() as connection:
            rows = connection.execute(query).all()
        table = pd.DataFrame(rows, columns=["campaign", "version", "created_utc",
                                            *_RESULT_COLUMNS])
        for column in ("ki_M", "pki", "pki_low", "pki_high", "ic50_M", "pic50", "hill"):
            table[column] = table[column].astype(float)
        return table

    def history(self, compound, *, all_versions=False) -> pd.DataFrame:
        """One compound across campaigns, oldest first (latest version of each campaign
        unless ``all_versions``); an empty table when the store never saw it."""
        table = self.results(all_versions=all_versions)
        return table[table["compound"] == str(compound)].reset_index(drop=True)

    def msr(self, *, quantities=("pki", "pic50")):
        """Minimum significant ratio from the compounds measured in more than one
        campaign (latest versions; pKi of ``determined`` compounds only, a bound being no
        measurement; pIC50 wherever a curve gave one). See :mod:`inhibkin.store.msr`."""
        table = self.results()
        table.loc[table["status"] != "determined", "pki"] = np.nan
        table.loc[table["status"].isin(["failed", "inactive"]), "pic50"] = np.nan
        return minimum_significant_ratio(table, quantities=quantities)


def write_campaign(target, campaign, *, name, inputs=(), notes="", options=None,
                   on_existing="version") -> StoredCampaign:
    """Open the store at ``target``, write ``campaign`` (see :meth:`ResultStore.write`)."""
    with ResultStore(target) as store:
        return store.write(campaign, name=name, inputs=inputs, notes=notes, options=options,
                           on_existing=on_existing)
