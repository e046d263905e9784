"""What the pages read: the API's own use cases, and a few reads only pages need.

An experiment page reads exactly what ``GET /v1/experiments/{id}`` answers
(:func:`service.usecases.read_experiment`, with every look and every plan version on
one page), so the page and the JSON show the same numbers. Each function here is one
read transaction.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from service import usecases
from service.db import site
from service.db.engine import Database
from service.db.records import Principal
from service.web.session import Session

MAX_LOOKS = 1000  # the API's largest page of looks; longer experiments show the latest
MAX_VERSIONS = 200  # the API's largest page of plan versions
LIST_PAGE = 50


def principal(db: Database, session: Session) -> Principal | None:
    """The team a session signs in: its key must still exist and not be revoked."""
    with db.read() as conn:
        return site.principal_by_key_id(conn, session.key_id, session.team_id)


@dataclass(frozen=True)
class ExperimentData:
    detail: dict[str, Any]  # the body of GET /v1/experiments/{id}
    key_labels: dict[str, str]  # key id -> label, for "recorded by"


def experiment(db: Database, team_id: str, exp_id: str) -> ExperimentData:
    """An experiment as the API answers it, with all its looks (the latest
    :data:`MAX_LOOKS`) and plan versions (the latest :data:`MAX_VERSIONS`)."""
    detail = usecases.read_experiment(db, team_id, exp_id, looks_limit=MAX_LOOKS,
                                      versions_limit=MAX_VERSIONS)
    looks_off = max(0, int(detail["look_count"]) - MAX_LOOKS)
    versions_off = max(0, int(detail["plan_version"]) - MAX_VERSIONS)
    if looks_off or versions_off:
        detail = usecases.read_experiment(db, team_id, exp_id, looks_offset=looks_off,
                                          looks_limit=MAX_LOOKS,
                                          versions_offset=versions_off,
                                          versions_limit=MAX_VERSIONS)
    who = {str(detail["created_by"])}
    who |= {str(v["recorded_by"]) for v in detail["plan_versions"]}
    with db.read() as conn:
        labels = site.key_labels(conn, team_id, who)
    return ExperimentData(detail, labels)


@dataclass(frozen=True)
class ListData:
    listing: dict[str, Any]  # the body of GET /v1/experiments
    latest: dict[str, site.LatestLook]


def experiments(db: Database, team_id: str, *, state: str | None, offset: int
                ) -> ListData:
    """A page of the team's experiments (newest first) and each one's latest look."""
    listing = usecases.list_experiments(db, team_id, state=state, limit=LIST_PAGE,
                                        offset=offset)
    with db.read() as conn:
        latest = site.latest_looks(conn, [(e["id"], e["look_count"])
                                          for e in listing["experiments"]])
    return ListData(listing, latest)
