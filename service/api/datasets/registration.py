"""Dataset registration behind the routes: confine sources, cap sizes, store, register, read."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pandas as pd
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.auth import Action, Principal, reaches_every_team
from service.config import Settings
from service.datasets.kinds import override_hint
from service.datasets.sources import (
    DatasetSource,
    LoadedTable,
    check_table_size,
    describe_table,
    load_table,
)
from service.datasets.sql_source import SqlAccess
from service.datasets.store import keep_table, stored_frame
from service.errors import BadInput, NotFound
from service.jobs.queries.datasets import register_dataset, visible_dataset
from service.store.db import insert_ignoring_duplicates
from service.store.models import Dataset, DatasetRegistration


def confine_path_source(source: Any, settings: Settings, *, field: str, hint: str) -> None:
    """Refuse a path source outright when the server has no data roots to confine it to."""
    # resolve_dataset_path accepts any path when no roots are given (the command line's case);
    # a server must never read arbitrary files on a caller's say-so.
    path = source.path if isinstance(source, DatasetSource) else None
    if isinstance(source, dict):
        path = source.get("path")
    if path is not None and not settings.data_roots:
        raise BadInput(
            f"{field}.path",
            f"this server reads no files by path because FOLDWISE_DATA_ROOTS is not set; {hint}",
        )


def server_base_dir(settings: Settings) -> Path:
    """Where relative paths in requests start: the first data root (else the server's home)."""
    return settings.data_roots[0] if settings.data_roots else settings.home


def check_shape(frame: pd.DataFrame, settings: Settings, *, field: str) -> None:
    """Refuse tables past the configured row and column caps."""
    check_table_size(
        frame, max_rows=settings.max_rows, max_columns=settings.max_columns, field=field
    )


def load_source(source: DatasetSource, settings: Settings, *, team: str) -> LoadedTable:
    """Load a registration body's source, confined to the data roots and capped in size."""
    confine_path_source(
        source, settings, field="dataset", hint="upload the file to /v1/datasets/upload instead."
    )
    table = load_table(
        source,
        base_dir=server_base_dir(settings),
        data_roots=settings.data_roots,
        field="dataset",
        sql=SqlAccess.for_team(settings, team),
    )
    check_shape(table.frame, settings, field="dataset")
    return table


def store_table(session: Session, table: LoadedTable, *, team: str, settings: Settings) -> bool:
    """Keep the table in the dataset store and let `team` see it; True if newly registered."""
    keep_table(session, table.frame, table.content_hash, settings)
    description = describe_table(table)
    insert_ignoring_duplicates(
        session,
        Dataset,
        [
            {
                "content_hash": table.content_hash,
                "n_rows": description["n_rows"],
                "n_columns": description["n_columns"],
                # kind is what jobs read back; missing and distinct serve the API's description
                "columns": description["columns"],
                "origin": description["origin"],
            }
        ],
    )
    known = session.get(DatasetRegistration, (team, table.content_hash)) is not None
    register_dataset(session, table.content_hash, team, origin=table.origin)
    session.flush()
    return not known


def stored_dataset(session: Session, content_hash: str) -> Dataset:
    """The dataset row with this hash; NotFound if there is none."""
    dataset = session.scalars(
        select(Dataset).where(Dataset.content_hash == content_hash)
    ).one_or_none()
    if dataset is None:
        raise NotFound(f"no dataset {content_hash!r}")
    return dataset


def team_copies(
    session: Session, principal: Principal, hashes: list[str]
) -> dict[str, DatasetRegistration]:
    """Per table, the registration the caller is shown: its own team's, else (analysts only)
    the earliest; another team's file name or query never reaches a team that cannot read it."""
    rows = session.scalars(
        select(DatasetRegistration)
        .where(DatasetRegistration.content_hash.in_(hashes))
        .order_by(DatasetRegistration.created_at, DatasetRegistration.team)
    )
    shown: dict[str, DatasetRegistration] = {}
    everyone = reaches_every_team(principal, Action.READ)
    for row in rows:
        if row.team == principal.team or (everyone and row.content_hash not in shown):
            shown[row.content_hash] = row
    return shown


def get_dataset(session: Session, content_hash: str, principal: Principal) -> Dataset:
    """The stored dataset, if the principal's team registered it (or it is an analyst)."""
    visible_dataset(session, content_hash, principal)
    return stored_dataset(session, content_hash)


def list_datasets(
    session: Session, principal: Principal, *, limit: int, offset: int
) -> tuple[list[Dataset], int]:
    """A page of the datasets the principal may see, newest first, and the total."""
    query = select(Dataset)
    if not reaches_every_team(principal, Action.READ):
        mine = select(DatasetRegistration.content_hash).where(
            DatasetRegistration.team == principal.team
        )
        query = query.where(Dataset.content_hash.in_(mine))
    total = session.scalar(select(func.count()).select_from(query.subquery()))
    page = session.scalars(
        query.order_by(Dataset.created_at.desc(), Dataset.id.desc()).limit(limit).offset(offset)
    )
    return list(page), int(total or 0)


def column_summaries(
    session: Session, dataset: Dataset, settings: Settings
) -> list[dict[str, Any]]:
    """Each column's kind, missing and distinct counts, and a hint on reading it otherwise."""
    columns = [dict(c) for c in dataset.columns]
    if all("missing" in c and "distinct" in c and "hint" in c for c in columns):
        return columns
    # Rows stored by a job submission carry kinds only; count from the stored table once asked.
    frame = stored_frame(session, dataset.content_hash, settings)
    for column in columns:
        values = frame[column["name"]]
        column["missing"] = int(values.isna().sum())
        column["distinct"] = int(values.nunique(dropna=True))
        column["hint"] = override_hint(values, column["kind"])
    return columns
