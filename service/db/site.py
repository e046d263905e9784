"""Reads the pages need beyond the API's, and the service's shared secrets.

Plain statements on a connection the caller holds, like :mod:`service.db.repository`
(no statistics, no callbacks):

- :func:`principal_by_key_id`: the team of a signed-in page session, from the key id
  its cookie names (a revoked key signs nobody in);
- :func:`key_labels`: who recorded a plan version, by the label of the key;
- :func:`latest_looks`: the time, summary and own row of each listed experiment's
  latest look (the list page's warning marks);
- :func:`secret`, :func:`insert_secret`: values generated once and shared by every
  server process (the key that signs session cookies), table ``service_secrets``.
"""

from __future__ import annotations

import json
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from sqlalchemy import Connection, and_, insert, or_, select

from service.db import tables
from service.db.records import Principal
from service.db.repository import now

_keys, _teams = tables.api_keys, tables.teams

_BY_KEY_ID = (
    select(_keys.c.id, _keys.c.label, _keys.c.team_id, _teams.c.name)
    .join(_teams, _teams.c.id == _keys.c.team_id)
)


def principal_by_key_id(conn: Connection, key_id: str, team_id: str) -> Principal | None:
    """The caller of a page session: the key ``key_id`` of team ``team_id``, unless the
    key was revoked (then ``None``, as for an unknown key)."""
    row = conn.execute(_BY_KEY_ID.where(
        _keys.c.id == key_id, _keys.c.team_id == team_id, _keys.c.revoked_at.is_(None)
    )).first()
    if row is None:
        return None
    return Principal(team_id=row[2], team_name=row[3], key_id=row[0], key_label=row[1])


def key_labels(conn: Connection, team_id: str, key_ids: Iterable[str]) -> dict[str, str]:
    """The labels of a team's keys (revoked ones included: they label past records)."""
    ids = sorted(set(key_ids))
    if not ids:
        return {}
    rows = conn.execute(select(_keys.c.id, _keys.c.label).where(
        _keys.c.team_id == team_id, _keys.c.id.in_(ids)))
    return {r[0]: r[1] for r in rows}


@dataclass(frozen=True)
class LatestLook:
    """An experiment's latest look, as the list page shows it."""

    recorded_at: str
    summary: dict[str, Any]  # the look-level summary (the analysis without its rows)
    result: dict[str, Any] | None  # the look's own row of the analysis


def latest_looks(conn: Connection, wanted: Iterable[tuple[str, int]]
                 ) -> dict[str, LatestLook]:
    """``{experiment id: its latest look}`` for ``(experiment id, look count)`` pairs
    (experiments without a look are left out); one indexed statement."""
    pairs = [(e, int(n)) for e, n in wanted if int(n) > 0]
    if not pairs:
        return {}
    lk = tables.looks
    cond = or_(*(and_(lk.c.experiment_id == e, lk.c.number == n) for e, n in pairs))
    out: dict[str, LatestLook] = {}
    for exp_id, number, recorded_at, analysis, result in conn.execute(
        select(lk.c.experiment_id, lk.c.number, lk.c.recorded_at, lk.c.analysis,
               lk.c.result).where(cond)
    ):
        summary = json.loads(analysis)
        own = json.loads(result) if result is not None else None
        if result is None and isinstance(summary, dict):  # a v2 row: the full analysis
            rows = summary.get("looks") or []
            own = rows[number - 1] if 0 < number <= len(rows) else None
            summary = {k: v for k, v in summary.items() if k != "looks"}
        out[exp_id] = LatestLook(recorded_at, summary if isinstance(summary, dict) else {},
                                 own if isinstance(own, dict) else None)
    return out


# --------------------------------------------------------------------------- secrets


def secret(conn: Connection, name: str) -> str | None:
    s = tables.service_secrets
    return conn.execute(select(s.c.value).where(s.c.name == name)).scalar()


def insert_secret(conn: Connection, name: str, value: str) -> None:
    """Insert a secret; a concurrent insert of the same name fails on the primary key
    (the caller then reads the winner's)."""
    conn.execute(insert(tables.service_secrets).values(name=name, value=value,
                                                       created_at=now()))
