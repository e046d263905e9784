"""The Python client of the seqtest HTTP service (``seqtest serve``).

A pipeline posts each look's cumulative totals, a notebook reads the decision::

    from seqtest.client import Client

    with Client("http://127.0.0.1:8000") as client:        # key from $SEQTEST_API_KEY
        exp = client.create_experiment("checkout button", plan=plan,
                                       arms=("classic", "large"))
        answer = client.post_look(exp.id, {"classic": {"n": 1500, "successes": 180},
                                           "large": {"n": 1500, "successes": 200}})
        answer.decision, answer.summary()

The client uses httpx, imported when a :class:`Client` is made (install it with the
``client`` extra); importing this module needs nothing beyond the library.

**Configuration.** The service's address is ``base_url=`` or ``$SEQTEST_URL`` (default
``http://127.0.0.1:8000``, where ``seqtest serve`` listens); the API key is ``api_key=``
or ``$SEQTEST_API_KEY``. The key is sent as ``Authorization: Bearer <key>`` and never
appears in a repr, an exception or a log line of this module.

**Idempotency.** Every write carries an ``Idempotency-Key``, so any retry, by this
client or by a re-run pipeline, stores nothing twice: the service answers a repeated
key with the first answer (``replayed`` is then true). By default the key is derived
from what the write *is* (:func:`look_key`, :func:`create_key`): a look's key from the
experiment, the look's number and its cumulative totals, not from ``final`` or
``daily_traffic``, so that a re-run which asks something different of an already
stored look is refused by the service (409, :class:`IdempotencyKeyReusedError`)
instead of being stored as another look. An explicit ``idempotency_key=`` replaces the
derived one. Keys are remembered by the service for ``SEQTEST_IDEMPOTENCY_TTL``
(7 days by default).

**Posting a series.** :meth:`Client.post_looks` posts the looks of a table in order and
is safe to re-run after any failure: it reads the looks already stored, checks that
they agree with the given ones (:class:`LookMismatchError` otherwise), and posts only the
rest, one at a time, each with its derived key. A look whose request was cut off by a
crash may still be in the service's hands when the re-run reads; its key makes the
re-run's post of the same look a replay.

**Retries** (:class:`RetryPolicy`): on connection errors, timeouts and answers 500 to
599 only, never on 4xx; exponential backoff with full jitter (a delay drawn uniformly
from 0 to ``min(max_backoff, backoff * 2**(retry - 1))``, common practice), at least
the ``Retry-After`` of a 503, within a total ``deadline`` per call; each try's timeouts
are cut to the time left.

**Errors** form one tree under :class:`seqtest.SeqtestError`: :class:`ClientError`;
:class:`ServiceError` (the service answered with an error: ``status``, ``code``,
``message``, ``details``, ``request_id``) split by status into
:class:`RequestRefusedError` (4xx: change the request; :class:`AuthenticationError`,
:class:`NotFoundError`, :class:`ConflictError` with :class:`ExperimentClosedError` and
:class:`IdempotencyKeyReusedError`, :class:`InvalidRequestError`) and
:class:`ServerError` (5xx, after the retries; :class:`ServiceUnavailableError`);
:class:`ServiceUnreachableError` (no answer); :class:`LookMismatchError` and
:class:`LookOrderError` (the stored looks are not the ones given).

seqtest supports, and does not replace, a qualified statistician and the rules that
govern the study.
"""

from __future__ import annotations

import email.utils
import hashlib
import json
import logging
import math
import numbers
import os
import random
import re
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from seqtest.core.errors import InputError, SeqtestError

__all__ = [
    "API_KEY_ENV",
    "CLOSED_STATES",
    "DEFAULT_URL",
    "URL_ENV",
    "AuthenticationError",
    "Client",
    "ClientError",
    "ConflictError",
    "Experiment",
    "ExperimentClosedError",
    "ExperimentPage",
    "IdempotencyKeyReusedError",
    "InvalidRequestError",
    "LookAnswer",
    "LookMismatchError",
    "LookOrderError",
    "NotFoundError",
    "PostedLooks",
    "RequestRefusedError",
    "RetryPolicy",
    "ServerError",
    "ServiceError",
    "ServiceUnavailableError",
    "ServiceUnreachableError",
    "StoredLook",
    "create_key",
    "look_key",
    "normalize_totals",
    "read_table_for",
]

#: Environment variable read when ``base_url`` is not given.
URL_ENV = "SEQTEST_URL"
#: Environment variable read when ``api_key`` is not given.
API_KEY_ENV = "SEQTEST_API_KEY"
#: Where ``seqtest serve`` listens by default.
DEFAULT_URL = "http://127.0.0.1:8000"
#: States in which an experiment takes no more looks.
CLOSED_STATES = ("stopped", "completed")

REQUEST_ID_HEADER = "Seqtest-Request-Id"
REPLAYED_HEADER = "Seqtest-Replayed"
IDEMPOTENCY_HEADER = "Idempotency-Key"
# Derived keys carry the version of their derivation: a change of derivation must
# change the prefix (re-runs within the service's key lifetime rely on equal keys).
_KEY_PREFIX = "seqtest-v1"
_VISIBLE_ASCII = re.compile(r"^[\x21-\x7e]{1,200}$")
_LOOKS_PAGE = 1000          # the service's largest page of looks

log = logging.getLogger("seqtest.client")


# ---------------------------------------------------------------------------
# Errors
# ---------------------------------------------------------------------------

class ClientError(SeqtestError):
    """Base of every error of the client."""


class ServiceError(ClientError):
    """The service answered with an error (its JSON error body).

    Attributes
    ----------
    status : int
        The HTTP status.
    code : str
        The service's stable error code, e.g. ``invalid_totals``, ``experiment_closed``
        (``http_<status>`` when the answer had no JSON error body, e.g. from a proxy).
    message : str
        What to change, in the service's words.
    details : list of dict
        Each problem with its ``location`` (e.g. ``["body", "totals", "classic", "n"]``)
        and ``message``.
    request_id : str or None
        The service's ``Seqtest-Request-Id`` of the answer (quote it when asking the
        service's operators).
    retry_after : float or None
        Seconds the service asked to wait (``Retry-After``).
    method, path : str
        The request (never its headers).
    """

    def __init__(self, status: int, code: str, message: str, *,
                 details: list[dict[str, Any]] | None = None, request_id: str | None = None,
                 retry_after: float | None = None, method: str = "", path: str = "") -> None:
        self.status = status
        self.code = code
        self.message = message
        self.details = list(details or [])
        self.request_id = request_id
        self.retry_after = retry_after
        self.method = method
        self.path = path
        where = f"{method} {path}: " if method else ""
        rid = f" (request id {request_id})" if request_id else ""
        super().__init__(f"{where}{status} {code}: {message}{rid}")


class RequestRefusedError(ServiceError):
    """4xx: the request must change before it is sent again (never retried)."""


class AuthenticationError(RequestRefusedError):
    """401: no API key, or a wrong or revoked one."""


class NotFoundError(RequestRefusedError):
    """404: no such experiment (or look) for this key's team."""


class ConflictError(RequestRefusedError):
    """409: the request conflicts with what is stored."""


class ExperimentClosedError(ConflictError):
    """409 ``experiment_closed``: the experiment is stopped or completed.

    Attributes
    ----------
    state, decision : str or None
        The experiment's state and decision, as the service gave them.
    """

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        first = self.details[0] if self.details else {}
        self.state: str | None = first.get("state")
        self.decision: str | None = first.get("decision")


class IdempotencyKeyReusedError(ConflictError):
    """409 ``idempotency_key_reused``: the key was used for another request (for a derived
    look key: this look number was posted with other totals, ``final`` or
    ``daily_traffic``)."""


class InvalidRequestError(RequestRefusedError, InputError):
    """422 (``invalid_request``, ``invalid_totals``, ``invalid_plan``,
    ``analysis_failed``): the service refused what was sent; ``details`` names the field.
    Also an :class:`~seqtest.InputError` (a ``ValueError``)."""


class ServerError(ServiceError):
    """5xx: the service failed, and kept failing through the retries."""


class ServiceUnavailableError(ServerError):
    """503: the service's database cannot take the request now (see ``retry_after``)."""


class ServiceUnreachableError(ClientError):
    """No answer: the connection failed or timed out, through every retry.

    Attributes
    ----------
    method, path : str
        The request.
    attempts : int
        Tries made.
    reason : str
        The last failure (its class and message).
    """

    def __init__(self, method: str, path: str, attempts: int, reason: str) -> None:
        self.method = method
        self.path = path
        self.attempts = attempts
        self.reason = reason
        tries = f"{attempts} tr{'y' if attempts == 1 else 'ies'}"
        text = f"{method} {path}: no answer from the service after {tries} ({reason})"
        if method not in ("GET", "HEAD"):
            text += ("; the write may or may not have been stored: send it again with the "
                     "same idempotency key, or read the experiment")
        super().__init__(text)


class LookMismatchError(ClientError, InputError):
    """A stored look differs from the look given for the same number.

    Attributes
    ----------
    look : int
        The look's number.
    stored, given : dict
        The totals per arm name, as stored and as given.
    """

    def __init__(self, experiment_id: str, look: int, stored: Mapping[str, Any],
                 given: Mapping[str, Any]) -> None:
        self.experiment_id = experiment_id
        self.look = look
        self.stored = dict(stored)
        self.given = dict(given)
        super().__init__(
            f"look {look}: experiment {experiment_id} stores the totals {_compact(stored)}, "
            f"the data gives {_compact(given)}; looks are never changed once stored: check "
            "that the data is cumulative and for this experiment (or, for data that starts "
            "at a later look, give its first look's number)")


class LookOrderError(ClientError):
    """The service numbered a posted look other than expected: another client posted
    looks to the experiment meanwhile. The look *is* stored, as number ``stored_as``."""

    def __init__(self, experiment_id: str, expected: int, stored_as: int) -> None:
        self.experiment_id = experiment_id
        self.expected = expected
        self.stored_as = stored_as
        super().__init__(
            f"experiment {experiment_id}: the totals posted as look {expected} were stored "
            f"as look {stored_as}; another client posted looks meanwhile. Read the "
            "experiment and check its looks before posting more")


_BY_STATUS: dict[int, type[ServiceError]] = {
    401: AuthenticationError,
    404: NotFoundError,
    409: ConflictError,
    422: InvalidRequestError,
    503: ServiceUnavailableError,
}
_BY_CODE: dict[str, type[ServiceError]] = {
    "experiment_closed": ExperimentClosedError,
    "idempotency_key_reused": IdempotencyKeyReusedError,
}


def _retry_after(value: str | None) -> float | None:
    """Seconds of a ``Retry-After`` header (delay in seconds, or an HTTP date)."""
    if value is None:
        return None
    value = value.strip()
    if value.isdigit():
        return float(value)
    try:
        when = email.utils.parsedate_to_datetime(value)
    except (TypeError, ValueError, IndexError):
        return None
    if when is None or when.tzinfo is None:
        return None
    return max(0.0, when.timestamp() - time.time())


def error_from_answer(status: int, body: bytes, headers: Mapping[str, str], *,
                      method: str = "", path: str = "") -> ServiceError:
    """The exception of an error answer: its class by status (and by code for 409), its
    code, message and details from the service's JSON error body."""
    code, message, details = f"http_{status}", "", None
    try:
        doc = json.loads(body.decode("utf-8")) if body else None
    except (UnicodeDecodeError, ValueError):
        doc = None
    err = doc.get("error") if isinstance(doc, dict) else None
    if isinstance(err, dict):
        code = str(err.get("code") or code)
        message = str(err.get("message") or "")
        raw = err.get("details")
        details = [d for d in raw if isinstance(d, dict)] if isinstance(raw, list) else None
    if not message:
        text = body.decode("utf-8", "replace").strip() if body else ""
        message = (text[:200] + "...") if len(text) > 200 else (text or "no error body")
    request_id = headers.get(REQUEST_ID_HEADER)
    if request_id is None:
        for d in details or []:
            if isinstance(d.get("request_id"), str):
                request_id = d["request_id"]
    cls = _BY_CODE.get(code)
    if cls is None or not issubclass(cls, _BY_STATUS.get(status, ServiceError)):
        cls = _BY_STATUS.get(status)
    if cls is None:
        cls = (RequestRefusedError if 400 <= status < 500
               else ServerError if 500 <= status < 600 else ServiceError)
    return cls(status, code, message, details=details, request_id=request_id,
               retry_after=_retry_after(headers.get("Retry-After")), method=method, path=path)


# ---------------------------------------------------------------------------
# Retries
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class RetryPolicy:
    """When and how long the client retries a request.

    Retried: connection errors, timeouts, and answers 500 to 599 (a 503's
    ``Retry-After`` is waited at least). Never retried: 4xx answers. Every write
    carries an idempotency key, so retrying it stores nothing twice.

    Attributes
    ----------
    attempts : int
        Tries in all, the first included (1: no retry). Default 5.
    backoff : float
        Seconds: the first retry waits up to this long. Default 0.5.
    max_backoff : float
        Seconds: no single wait (before ``Retry-After``) is longer. Default 8.
    deadline : float
        Seconds for one call, its tries and waits included; no retry starts that could
        not finish by then, and each try's timeouts are cut to the time left.
        Default 60.
    """

    attempts: int = 5
    backoff: float = 0.5
    max_backoff: float = 8.0
    deadline: float = 60.0

    def __post_init__(self) -> None:
        if isinstance(self.attempts, bool) or not isinstance(self.attempts, int) \
                or self.attempts < 1:
            raise InputError(f"attempts: got {self.attempts!r}; allowed is a whole number "
                             ">= 1")
        for name in ("backoff", "max_backoff", "deadline"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or not math.isfinite(v) \
                    or v < 0 or (name == "deadline" and v == 0):
                allowed = "a number of seconds > 0" if name == "deadline" else \
                    "a number of seconds >= 0"
                raise InputError(f"{name}: got {v!r}; allowed is {allowed}")

    def delay(self, retry: int, rng: random.Random | None = None) -> float:
        """The wait before retry number ``retry`` (1 for the first): full jitter, drawn
        uniformly from 0 to ``min(max_backoff, backoff * 2**(retry - 1))``."""
        ceiling = min(self.max_backoff, self.backoff * 2.0 ** min(retry - 1, 60))
        return (rng or random).uniform(0.0, ceiling)


# ---------------------------------------------------------------------------
# Totals and keys
# ---------------------------------------------------------------------------

def _number(value: Any, where: str) -> int | float:
    """A total as sent: a finite real number; whole floats become ints, so that the same
    totals always give the same JSON (and the same key and request)."""
    if hasattr(value, "item") and not isinstance(value, (int, float)):
        value = value.item()        # numpy scalars
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise InputError(f"{where}: got {value!r}; allowed is a number")
    if isinstance(value, numbers.Integral):
        return int(value)
    v = float(value)
    if not math.isfinite(v):
        raise InputError(f"{where}: got {v!r}; allowed is a finite number")
    return int(v) if v.is_integer() and abs(v) <= 2.0 ** 53 else v


def normalize_totals(totals: Mapping[str, Mapping[str, Any]]) -> dict[str, dict[str, Any]]:
    """Cumulative totals per arm name as the client sends them: plain numbers (whole
    floats as ints), names as strings, every value checked to be a finite number. An
    experiment with several metrics takes ``{metric: {arm: {total: number}}}``: each
    metric's arms are normalised the same way."""
    if isinstance(totals, Mapping) and totals and all(
            isinstance(v, Mapping) and v and all(isinstance(x, Mapping) for x in v.values())
            for v in totals.values()):
        return {str(m): _normalize_arms(v, f"totals[{m!r}]") for m, v in totals.items()}
    return _normalize_arms(totals, "totals")


def _normalize_arms(totals: Any, where: str) -> dict[str, dict[str, Any]]:
    if not isinstance(totals, Mapping) or not totals:
        raise InputError(f"{where}: got {_compact(totals)}; allowed is a mapping "
                         "{arm name: {total: number}}, e.g. {'control': {'n': 1000, "
                         "'successes': 100}, 'treatment': {...}} (an experiment with "
                         "several metrics: {metric: {arm name: {total: number}}})")
    out: dict[str, dict[str, Any]] = {}
    for arm, values in totals.items():
        if not isinstance(values, Mapping) or not values:
            raise InputError(f"{where}[{arm!r}]: got {_compact(values)}; allowed is a "
                             "mapping {total: number}, e.g. {'n': 1000, 'successes': 100}")
        out[str(arm)] = {str(k): _number(v, f"{where}[{arm!r}][{k!r}]")
                         for k, v in values.items()}
    return out


def _canonical(value: Any) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), allow_nan=False,
                      ensure_ascii=True)


def look_key(experiment_id: str, totals: Mapping[str, Mapping[str, Any]],
             look: int | None = None) -> str:
    """The idempotency key a look is posted with by default.

    ``seqtest-v1-look-<look>-<h>`` (``seqtest-v1-look-<h>`` without a number), ``h``
    being the first 48 hexadecimal digits of the SHA-256 of the canonical JSON of
    ``{"experiment": id, "look": look, "totals": totals}`` (sorted keys, no spaces,
    totals as :func:`normalize_totals` makes them). The same look of the same
    experiment always gets the same key, in any process.
    """
    doc = {"experiment": str(experiment_id), "look": look,
           "totals": normalize_totals(totals)}
    digest = hashlib.sha256(_canonical(doc).encode("ascii")).hexdigest()[:48]
    middle = "look" if look is None else f"look-{int(look)}"
    return f"{_KEY_PREFIX}-{middle}-{digest}"


def create_key(body: Mapping[str, Any]) -> str:
    """The idempotency key an experiment is created with by default:
    ``seqtest-v1-create-<h>``, ``h`` from the SHA-256 of the canonical JSON of the
    request body. The same request within the service's key lifetime returns the same
    experiment (give an explicit key to create a second, identical one)."""
    digest = hashlib.sha256(_canonical(dict(body)).encode("ascii")).hexdigest()[:48]
    return f"{_KEY_PREFIX}-create-{digest}"


def _check_key(key: str) -> str:
    if not isinstance(key, str) or not _VISIBLE_ASCII.match(key):
        raise InputError(f"idempotency_key: got {_compact(key)}; allowed is 1 to 200 "
                         "visible ASCII characters (no spaces), e.g. a UUID")
    return key


def _compact(value: Any, limit: int = 160) -> str:
    try:
        text = json.dumps(value, sort_keys=True, default=str)
    except (TypeError, ValueError):
        text = repr(value)
    return text if len(text) <= limit else text[:limit - 15] + f"... ({len(text)} chars)"


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------

class _AnalysisViews:
    """Shared displays of a result that carries an ``analysis`` (the library's fields)."""

    analysis: dict[str, Any] | None

    def summary(self, *, noun: str | None = None) -> str | None:
        """The decision in plain language (:func:`seqtest.reporting.summarize`), with the
        warnings and the caution; None before the first look."""
        if not self.analysis:
            return None
        from seqtest.reporting.summary import summarize
        return summarize(self.analysis, noun=noun).full_text()

    def _repr_html_(self) -> str | None:
        if not self.analysis:
            return None
        from seqtest.reporting.html import analysis_html
        return analysis_html(self.analysis)


@dataclass(frozen=True)
class StoredLook:
    """A look as the service stores it."""

    look: int
    totals: dict[str, dict[str, Any]]
    decision: str
    final: bool
    plan_version: int
    recorded_at: str
    result: dict[str, Any] | None = field(default=None, repr=False)

    @classmethod
    def from_json(cls, d: Mapping[str, Any]) -> StoredLook:
        return cls(look=int(d["look"]), totals=dict(d.get("totals") or {}),
                   decision=str(d.get("decision")), final=bool(d.get("final")),
                   plan_version=int(d.get("plan_version") or 0),
                   recorded_at=str(d.get("recorded_at", "")), result=d.get("result"))


@dataclass(frozen=True)
class Experiment(_AnalysisViews):
    """An experiment as the service gives it.

    ``plan`` (the version in force: ``document``, ``boundaries``, ...), ``looks`` and
    ``analysis`` are filled when the experiment was read (:meth:`Client.experiment`);
    a list gives the summary fields only. ``raw`` is the answer as received.
    """

    id: str
    name: str
    state: str
    decision: str | None
    look_count: int
    metric_kind: str
    arms: dict[str, str] | list[str]
    max_n: float | None = None
    plan_version: int = 1
    plan: dict[str, Any] | None = field(default=None, repr=False)
    looks: list[StoredLook] = field(default_factory=list, repr=False)
    analysis: dict[str, Any] | None = field(default=None, repr=False)
    replayed: bool = False
    raw: dict[str, Any] = field(default_factory=dict, repr=False)

    @classmethod
    def from_json(cls, d: Mapping[str, Any], *, replayed: bool = False,
                  looks: Sequence[StoredLook] | None = None,
                  analysis: dict[str, Any] | None = None) -> Experiment:
        if looks is None:
            looks = [StoredLook.from_json(x) for x in d.get("looks_recorded") or []]
        return cls(
            id=str(d["id"]), name=str(d.get("name", "")), state=str(d.get("state")),
            decision=d.get("decision"), look_count=int(d.get("look_count") or 0),
            metric_kind=str(d.get("metric_kind", "")),
            arms=list(d["arms"]) if isinstance(d.get("arms"), list)
            else dict(d.get("arms") or {}), max_n=d.get("max_n"),
            plan_version=int(d.get("plan_version") or 1), plan=d.get("plan"),
            looks=list(looks), analysis=analysis if analysis is not None else d.get("analysis"),
            replayed=replayed, raw=dict(d))

    @property
    def is_experiment_plan(self) -> bool:
        """Many arms and several metrics: ``arms`` is the list of names, the control
        first, and looks are ``{arm: totals}`` or ``{metric: {arm: totals}}``."""
        return isinstance(self.arms, list)

    @property
    def control(self) -> str:
        """The control arm's name."""
        if isinstance(self.arms, list):
            return self.arms[0]
        return self.arms.get("control", "control")

    @property
    def closed(self) -> bool:
        """Stopped or completed: the experiment takes no more looks."""
        return self.state in CLOSED_STATES

    @property
    def plan_document(self) -> dict[str, Any] | None:
        """The plan document in force (as ``seqtest plan --json`` writes it)."""
        return (self.plan or {}).get("document")

    @property
    def boundaries(self) -> list[dict[str, Any]] | None:
        """The plan's boundary table (one row per planned look)."""
        return (self.plan or {}).get("boundaries")

    def plan_object(self) -> Any:
        """The plan in force as a library object (``seqtest.plan_from_dict``, trusted:
        the service verified it when it was posted)."""
        from seqtest.planning.documents import plan_from_dict
        if self.plan_document is None:
            raise InputError(f"experiment {self.id}: got no plan document (listed, not "
                             "read); allowed is an experiment from Client.experiment()")
        return plan_from_dict(self.plan_document, trust=True)

    def plot(self, path: Any = None) -> Any:
        """The looks against the boundaries (:func:`seqtest.plot_analysis`); a Figure."""
        from seqtest.plotting import plot_analysis
        if not self.analysis:
            raise InputError(f"experiment {self.id}: got no looks yet; allowed is an "
                             "experiment with at least one look")
        plan = self.plan_object() if self.plan_document is not None else None
        return plot_analysis(self.analysis, plan, path, title=self.name)


@dataclass(frozen=True)
class LookAnswer(_AnalysisViews):
    """The service's answer to a posted (or read) look."""

    experiment_id: str
    look: int
    decision: str
    state: str
    final: bool
    totals: dict[str, dict[str, Any]]
    replayed: bool = False
    result: dict[str, Any] | None = field(default=None, repr=False)
    analysis: dict[str, Any] | None = field(default=None, repr=False)
    raw: dict[str, Any] = field(default_factory=dict, repr=False)

    @classmethod
    def from_json(cls, d: Mapping[str, Any], *, replayed: bool = False) -> LookAnswer:
        return cls(experiment_id=str(d.get("experiment_id")), look=int(d["look"]),
                   decision=str(d.get("decision")), state=str(d.get("state")),
                   final=bool(d.get("final")), totals=dict(d.get("totals") or {}),
                   replayed=replayed, result=d.get("result"), analysis=d.get("analysis"),
                   raw=dict(d))

    def plot(self, plan: Any = None, path: Any = None, *, title: str | None = None) -> Any:
        """The looks so far against the boundaries (:func:`seqtest.plot_analysis`)."""
        from seqtest.plotting import plot_analysis
        return plot_analysis(self.analysis, plan, path, title=title)


@dataclass(frozen=True)
class ExperimentPage:
    """A page of the team's experiments, newest first."""

    experiments: list[Experiment]
    total: int
    limit: int
    offset: int


@dataclass(frozen=True)
class PostedLooks(_AnalysisViews):
    """What :meth:`Client.post_looks` did.

    Attributes
    ----------
    experiment_id : str
    already_stored : list of int
        Numbers of the given looks found stored (and equal), so not posted again.
    posted : list of LookAnswer
        The looks posted now, in order (a replayed answer counts: its look was posted by
        an earlier, interrupted run and is stored once).
    not_posted : list of int
        Numbers of given looks not posted because the experiment had stopped or
        completed before them.
    state, decision : str
        The experiment's state and decision after the last look.
    analysis : dict or None
        The analysis at the experiment's latest look (every look's row).
    look_count : int
        Looks stored in all.
    notes : list of str
        Things to know (e.g. a look stored without the ``final`` asked for now).
    """

    experiment_id: str
    already_stored: list[int]
    posted: list[LookAnswer]
    not_posted: list[int]
    state: str
    decision: str | None
    look_count: int
    analysis: dict[str, Any] | None = field(default=None, repr=False)
    notes: list[str] = field(default_factory=list)


# ---------------------------------------------------------------------------
# The client
# ---------------------------------------------------------------------------

def _import_httpx() -> Any:
    try:
        import httpx
    except ImportError as exc:
        raise ImportError("seqtest.client needs httpx, which is not installed; install "
                          "it with: pip install 'seqtest[client]'", name="httpx") from exc
    return httpx


def _check_url(url: str) -> str:
    from urllib.parse import urlsplit
    if not isinstance(url, str) or not url.strip():
        raise InputError(f"base_url: got {url!r}; allowed is http(s)://host[:port], e.g. "
                         f"{DEFAULT_URL}")
    parts = urlsplit(url.strip())
    if parts.scheme not in ("http", "https") or not parts.hostname:
        raise InputError(f"base_url: got {url!r}; allowed is http(s)://host[:port], e.g. "
                         f"{DEFAULT_URL}")
    if parts.username is not None or parts.password is not None:
        raise InputError("base_url: got a URL with a user name or password; allowed is "
                         "http(s)://host[:port] (the API key goes in api_key= or "
                         f"${API_KEY_ENV})")
    return url.strip().rstrip("/")


class Client:
    """A connection to the seqtest service.

    Parameters
    ----------
    base_url : str, optional
        The service, e.g. ``https://seqtest.example.internal``; default ``$SEQTEST_URL``,
        else ``http://127.0.0.1:8000``.
    api_key : str, optional
        A key from ``seqtest keys create``; default ``$SEQTEST_API_KEY``. Never shown.
    timeout : float
        Seconds to wait for each try's answer (reading, writing, a pooled connection).
        Default 30.
    connect_timeout : float
        Seconds to open a connection. Default 5.
    retry : RetryPolicy, optional
        When to retry (default :class:`RetryPolicy()`; ``RetryPolicy(attempts=1)`` never
        retries).
    transport : httpx transport, optional
        For tests or proxies: an ``httpx.BaseTransport`` to send requests through.

    The client holds a pool of connections: use it as a context manager, or call
    :meth:`close`.
    """

    def __init__(self, base_url: str | None = None, api_key: str | None = None, *,
                 timeout: float = 30.0, connect_timeout: float = 5.0,
                 retry: RetryPolicy | None = None, transport: Any = None) -> None:
        httpx = _import_httpx()
        url = base_url if base_url is not None else os.environ.get(URL_ENV) or DEFAULT_URL
        self.base_url = _check_url(url)
        key = api_key if api_key is not None else os.environ.get(API_KEY_ENV)
        if not key:
            raise InputError(f"api_key: missing; allowed is a key from 'seqtest keys create', "
                             f"given as api_key= or in ${API_KEY_ENV}")
        if not isinstance(key, str) or not _VISIBLE_ASCII.match(key.strip()):
            # the value is never shown
            raise InputError("api_key: got a key with spaces, control or non-ASCII "
                             "characters, or over 200 characters; allowed is the key as "
                             "'seqtest keys create' printed it")
        for name, v in (("timeout", timeout), ("connect_timeout", connect_timeout)):
            if isinstance(v, bool) or not isinstance(v, numbers.Real) or not v > 0 \
                    or not math.isfinite(v):
                raise InputError(f"{name}: got {v!r}; allowed is a number of seconds > 0")
        if retry is not None and not isinstance(retry, RetryPolicy):
            raise InputError(f"retry: got {type(retry).__name__}; allowed is a RetryPolicy")
        self.timeout = float(timeout)
        self.connect_timeout = float(connect_timeout)
        self.retry = retry or RetryPolicy()
        from seqtest.core.version import __version__
        self._httpx = httpx
        self._http = httpx.Client(
            base_url=self.base_url, transport=transport,
            headers={"Authorization": f"Bearer {key.strip()}",
                     "Accept": "application/json",
                     "User-Agent": f"seqtest-client/{__version__}"},
            timeout=httpx.Timeout(self.timeout, connect=self.connect_timeout),
            follow_redirects=False)
        # seams for the tests of the retry policy (time and randomness)
        self._sleep: Callable[[float], None] = time.sleep
        self._clock: Callable[[], float] = time.monotonic
        self._rng = random.Random()

    def __repr__(self) -> str:
        return f"Client(base_url={self.base_url!r}, api_key=<hidden>, retry={self.retry!r})"

    def __enter__(self) -> Client:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Close the pooled connections."""
        self._http.close()

    # -- the one request path ---------------------------------------------------------

    def _request(self, method: str, path: str, *, body: Any = None,
                 params: Mapping[str, Any] | None = None,
                 idempotency_key: str | None = None) -> tuple[dict[str, Any], bool]:
        """Send a request with the retry policy; the JSON answer and whether the service
        replayed it. Raises a :class:`ServiceError` or :class:`ServiceUnreachableError`."""
        httpx = self._httpx
        policy = self.retry
        headers = {IDEMPOTENCY_HEADER: idempotency_key} if idempotency_key else {}
        content = None
        if body is not None:
            content = json.dumps(body, allow_nan=False).encode("utf-8")
            headers["Content-Type"] = "application/json"
        start = self._clock()
        attempt = 0
        while True:
            attempt += 1
            left = policy.deadline - (self._clock() - start)
            timeout = httpx.Timeout(max(min(self.timeout, left), 0.001),
                                    connect=max(min(self.connect_timeout, left), 0.001))
            failure: ClientError
            try:
                resp = self._http.request(method, path, content=content, params=params,
                                          headers=headers, timeout=timeout)
            except (httpx.TimeoutException, httpx.NetworkError, httpx.RemoteProtocolError,
                    httpx.ProxyError) as exc:
                failure = ServiceUnreachableError(method, path, attempt,
                                                  f"{type(exc).__name__}: {exc}")
            except httpx.HTTPError as exc:   # a bad URL or header: retrying cannot help
                raise ClientError(f"{method} {path}: the request could not be sent "
                                  f"({type(exc).__name__}: {exc})") from None
            else:
                if resp.status_code < 300:
                    replayed = resp.headers.get(REPLAYED_HEADER, "").lower() == "true"
                    log.debug("%s %s -> %d%s", method, path, resp.status_code,
                              " (replayed)" if replayed else "")
                    try:
                        doc = resp.json()
                    except ValueError:
                        raise ServiceError(resp.status_code, "invalid_answer",
                                           "the answer is not JSON; is base_url the seqtest "
                                           "service?",
                                           request_id=resp.headers.get(REQUEST_ID_HEADER),
                                           method=method, path=path) from None
                    if not isinstance(doc, dict):
                        raise ServiceError(resp.status_code, "invalid_answer",
                                           "the answer is not a JSON object",
                                           method=method, path=path)
                    return doc, replayed
                err = error_from_answer(resp.status_code, resp.content, resp.headers,
                                        method=method, path=path)
                if not isinstance(err, ServerError):
                    raise err
                failure = err
            # retry, or give up
            elapsed = self._clock() - start
            wait = policy.delay(attempt, self._rng)
            after = failure.retry_after if isinstance(failure, ServiceError) else None
            if after is not None:
                wait = max(wait, after)
            if attempt >= policy.attempts or elapsed + wait >= policy.deadline:
                raise failure
            log.warning("%s %s: %s; retrying in %.2f s (try %d of %d)", method, path,
                        _failure_text(failure), wait, attempt + 1, policy.attempts)
            self._sleep(wait)

    # -- reads ---------------------------------------------------------------------------

    def health(self) -> dict[str, Any]:
        """The service's health (``GET /v1/health``)."""
        return self._request("GET", "/v1/health")[0]

    def experiment(self, experiment_id: str, *, looks: bool = True) -> Experiment:
        """Read an experiment: its state, decision, plan in force, looks and analysis.

        With ``looks=True`` (default) every stored look is read (pages of 1000), and the
        analysis carries every look's row; with ``looks=False`` one look is read: the
        state, the decision, the plan and the analysis' summary are whole, its rows and
        ``looks`` hold the first look only."""
        path = f"/v1/experiments/{_path_id(experiment_id)}"
        limit = _LOOKS_PAGE if looks else 1
        doc, _ = self._request("GET", path, params={"looks_offset": 0, "looks_limit": limit})
        if not looks:
            return Experiment.from_json(doc)
        stored = [StoredLook.from_json(x) for x in doc.get("looks_recorded") or []]
        total = int((doc.get("looks_page") or {}).get("total") or doc.get("look_count") or 0)
        last = doc
        while len(stored) < total:
            page, _ = self._request("GET", path, params={"looks_offset": len(stored),
                                                         "looks_limit": _LOOKS_PAGE})
            more = [StoredLook.from_json(x) for x in page.get("looks_recorded") or []]
            if not more:
                break
            stored += more
            last = page
            total = int((page.get("looks_page") or {}).get("total") or total)
        analysis = last.get("analysis")
        if isinstance(analysis, dict):
            analysis = {**analysis, "looks": [lk.result for lk in stored]}
        return Experiment.from_json(last, looks=stored, analysis=analysis)

    def look(self, experiment_id: str, look: int) -> LookAnswer:
        """One stored look, and the analysis as it was at that look."""
        return LookAnswer.from_json(self._request(
            "GET", f"/v1/experiments/{_path_id(experiment_id)}/looks/{int(look)}")[0])

    def experiments(self, *, state: str | None = None, limit: int = 50,
                    offset: int = 0) -> ExperimentPage:
        """A page of the team's experiments, newest first (``state``: only those in it)."""
        params: dict[str, Any] = {"limit": limit, "offset": offset}
        if state is not None:
            params["state"] = state
        doc, _ = self._request("GET", "/v1/experiments", params=params)
        return ExperimentPage([Experiment.from_json(e) for e in doc.get("experiments", [])],
                              int(doc.get("total", 0)), int(doc.get("limit", limit)),
                              int(doc.get("offset", offset)))

    def iter_experiments(self, *, state: str | None = None) -> Iterator[Experiment]:
        """Every experiment of the team, newest first, page by page."""
        offset = 0
        while True:
            page = self.experiments(state=state, limit=200, offset=offset)
            yield from page.experiments
            offset += len(page.experiments)
            if not page.experiments or offset >= page.total:
                return

    # -- writes --------------------------------------------------------------------------

    def create_experiment(self, name: str, *, plan: Any = None,
                          design: Mapping[str, Any] | None = None,
                          arms: Sequence[str] | Mapping[str, str] | None = None,
                          metric_kind: str | None = None, allocation: float | None = None,
                          max_n: float | None = None, fraction_basis: str | None = None,
                          description: str | None = None,
                          idempotency_key: str | None = None) -> Experiment:
        """Create an experiment with its plan.

        Parameters
        ----------
        name : str
        plan : Plan, MixturePlan or dict, optional
            The plan, or its document (``seqtest plan --json``); or give `design`.
        design : mapping, optional
            Inputs from which the service designs the plan (those of
            :func:`seqtest.design`, with ``kind="mixture"`` for :func:`seqtest.mixture_plan`).
        arms : (control, treatment) or {"control": ..., "treatment": ...}, optional
            The arms' names; looks are posted under them. Default control, treatment.
            An experiment plan (``seqtest.experiment_plan``, many arms) names its arms
            itself: leave them out, or give the same names, the control first.
        metric_kind, allocation, max_n, fraction_basis, description : optional
            As the service takes them; left out, the service's defaults apply.
        idempotency_key : str, optional
            Default :func:`create_key` of the request: the same request returns the same
            experiment (``replayed`` true) for the service's key lifetime.
        """
        if (plan is None) == (design is None):
            raise InputError("plan: got " + ("both plan and design" if plan is not None
                                             else "neither plan nor design")
                             + "; allowed is one of plan= (a plan or its document) or "
                             "design= (inputs to design it)")
        from seqtest.core.jsonable import plain
        body: dict[str, Any] = {"name": name}
        if plan is not None:
            doc = plan.to_dict() if hasattr(plan, "to_dict") else plan
            if not isinstance(doc, Mapping):
                raise InputError(f"plan: got {type(plan).__name__}; allowed is a Plan, a "
                                 "MixturePlan or a plan document (dict)")
            body["plan"] = plain(dict(doc))
        else:
            if not isinstance(design, Mapping):
                raise InputError(f"design: got {type(design).__name__}; allowed is a "
                                 "mapping of design inputs, e.g. {'looks': 5}")
            body["design"] = plain(dict(design))
        if arms is not None:
            body["arms"] = _arms(arms)
        for key, value in (("metric_kind", metric_kind), ("allocation", allocation),
                           ("max_n", max_n), ("fraction_basis", fraction_basis),
                           ("description", description)):
            if value is not None:
                body[key] = plain(value)
        key = _check_key(idempotency_key) if idempotency_key is not None \
            else create_key(body)
        doc_out, replayed = self._request("POST", "/v1/experiments", body=body,
                                          idempotency_key=key)
        return Experiment.from_json(doc_out, replayed=replayed)

    def post_look(self, experiment_id: str, totals: Mapping[str, Mapping[str, Any]], *,
                  look: int | None = None, final: bool = False,
                  daily_traffic: float | None = None,
                  idempotency_key: str | None = None) -> LookAnswer:
        """Post one look: the cumulative totals per arm name.

        Parameters
        ----------
        experiment_id : str
        totals : mapping
            ``{arm name: {total: number}}``, cumulative since the start, e.g.
            ``{"classic": {"n": 1500, "successes": 180}, "large": {...}}``.
        look : int, optional
            The number this look should get; it enters the derived key, and an answer
            numbering it otherwise raises :class:`LookOrderError` (the look is then
            stored under the service's number). The service numbers looks itself.
        final : bool
            The last look: it spends whatever error is left.
        daily_traffic : float, optional
            Units per day over both arms, for the projection in days.
        idempotency_key : str, optional
            Default :func:`look_key` of the experiment, ``look`` and ``totals``.

        Use :meth:`post_looks` to post a series safely from a pipeline that may be re-run.
        """
        sent = normalize_totals(totals)
        if look is not None and (isinstance(look, bool) or not isinstance(look, int)
                                 or look < 1):
            raise InputError(f"look: got {look!r}; allowed is a look number 1, 2, 3, ...")
        body: dict[str, Any] = {"totals": sent, "final": bool(final)}
        if daily_traffic is not None:
            body["daily_traffic"] = _number(daily_traffic, "daily_traffic")
        key = _check_key(idempotency_key) if idempotency_key is not None \
            else look_key(experiment_id, sent, look)
        doc, replayed = self._request(
            "POST", f"/v1/experiments/{_path_id(experiment_id)}/looks", body=body,
            idempotency_key=key)
        answer = LookAnswer.from_json(doc, replayed=replayed)
        if look is not None and answer.look != look:
            raise LookOrderError(str(experiment_id), look, answer.look)
        return answer

    def post_looks(self, experiment_id: str, looks: Any, *, first: int | None = 1,
                   final: bool = False, daily_traffic: float | None = None,
                   columns: Mapping[str, str | None] | None = None,
                   control: str | None = None,
                   on_look: Callable[[int, LookAnswer | None], None] | None = None
                   ) -> PostedLooks:
        """Post a series of looks in order; re-running it posts nothing twice.

        Reads the looks already stored, checks that each agrees with the given look of
        the same number (:class:`LookMismatchError` otherwise), and posts the others in
        order, one at a time, each with its derived key (:func:`look_key`), until the
        experiment stops or completes (the rest are reported in ``not_posted``).

        Parameters
        ----------
        experiment_id : str
        looks : list of mappings, ArmLooks or DataFrame
            Cumulative totals per look, keyed by the experiment's arm names (a list of
            ``{arm: {total: number}}``) or by the roles ``control`` and ``treatment``
            (as :func:`seqtest.analyze` takes them); or a table of looks in either layout of
            :mod:`seqtest.monitoring.lookfile` (a DataFrame, read with the experiment's
            metric kind, ``columns`` and ``control``; or an ``ArmLooks``), whose arms are
            the experiment's (by name) or named ``control`` and ``treatment``.
        first : int or None
            The number of the first given look (default 1: the data starts at the first
            look). None: found by the totals: the stored look equal to the first given
            one, else the next look.
        final : bool
            Post the last given look as final.
        daily_traffic : float, optional
            Sent with every look posted.
        columns, control : optional
            Column mapping and control arm for a DataFrame (as
            :func:`seqtest.read_arm_looks` takes them; the control defaults to the
            experiment's control arm).
        on_look : callable, optional
            Called as ``on_look(number, answer)`` after each look: ``answer`` is the
            service's (posted or replayed), or None for a look found stored.

        Returns
        -------
        PostedLooks
        """
        exp = self.experiment(experiment_id)
        given = self.looks_for(exp, looks, columns=columns, control=control)
        if not given:
            raise InputError("looks: got none; allowed is at least one look")
        stored = {lk.look: lk for lk in exp.looks}
        if first is None:
            match = [lk.look for lk in exp.looks
                     if normalize_totals(lk.totals) == given[0]]
            first = match[0] if match else exp.look_count + 1
        if isinstance(first, bool) or not isinstance(first, int) or first < 1:
            raise InputError(f"first: got {first!r}; allowed is a look number 1, 2, 3, ... "
                             "or None")
        if first > exp.look_count + 1:
            raise InputError(f"first: got {first}; experiment {exp.id} has "
                             f"{exp.look_count} look(s), so allowed is at most "
                             f"{exp.look_count + 1} (post looks {exp.look_count + 1} to "
                             f"{first - 1} first)")
        notes: list[str] = []
        already: list[int] = []
        numbers_ = range(first, first + len(given))
        for k, totals in zip(numbers_, given, strict=True):
            if k in stored:
                if normalize_totals(stored[k].totals) != totals:
                    raise LookMismatchError(exp.id, k, stored[k].totals, totals)
                already.append(k)
        last = first + len(given) - 1
        if final and last in stored and not stored[last].final:
            notes.append(f"look {last} was stored before as not final; a stored look is "
                         "never changed, so it stays so")
        for k in already:
            if on_look is not None:
                on_look(k, None)
        state, decision, analysis = exp.state, exp.decision, exp.analysis
        count = exp.look_count
        posted: list[LookAnswer] = []
        not_posted: list[int] = []
        for k, totals in zip(numbers_, given, strict=True):
            if k in stored:
                continue
            if state in CLOSED_STATES:
                not_posted.append(k)
                continue
            try:
                answer = self.post_look(exp.id, totals, look=k, final=final and k == last,
                                        daily_traffic=daily_traffic)
            except ExperimentClosedError as exc:      # closed by another client meanwhile
                state = exc.state or "stopped"
                decision = exc.decision or decision
                not_posted.append(k)
                continue
            posted.append(answer)
            state, decision, analysis = answer.state, answer.decision, answer.analysis
            count = max(count, answer.look)
            if on_look is not None:
                on_look(k, answer)
        if not_posted:
            span = (f"look {not_posted[0]}" if len(not_posted) == 1
                    else f"looks {not_posted[0]} to {not_posted[-1]}")
            notes.append(f"{span} not posted: the experiment is {state} (decision "
                         f"{decision}); it takes no more looks")
        if exp.look_count > last:
            notes.append(f"the experiment has {exp.look_count} looks stored, more than the "
                         f"{last} given")
        return PostedLooks(exp.id, already, posted, not_posted, state, decision, count,
                           analysis, notes)

    @staticmethod
    def looks_for(exp: Experiment, looks: Any, *,
                  columns: Mapping[str, str | None] | None = None,
                  control: str | None = None) -> list[dict[str, dict[str, Any]]]:
        """Given looks as the totals per the experiment's arm names (see
        :meth:`post_looks` for what is accepted)."""
        if isinstance(looks, Sequence) and not isinstance(looks, (str, bytes)):
            out = [normalize_totals(lk) for lk in looks]
            if isinstance(exp.arms, list):
                return out          # an experiment plan's looks go as they are
            arms = exp.arms
            roles = {"control", "treatment"}
            names = {arms.get("control"), arms.get("treatment")}
            if out and names != roles and all(set(lk) == roles for lk in out):
                # keyed by role, as seqtest.analyze takes looks: put under the names
                out = [{arms[role]: v for role, v in lk.items()} for lk in out]
            return out
        table = looks
        if not hasattr(table, "treatments"):
            table = read_table_for(exp, looks, columns=columns, control=control)
        if isinstance(exp.arms, list):
            return [normalize_totals(lk) for lk in _by_plan_arm_names(exp, table)]
        return [normalize_totals(lk) for lk in _by_experiment_names(exp, table)]


def _failure_text(failure: ClientError) -> str:
    if isinstance(failure, ServiceError):
        return f"{failure.status} {failure.code}"
    if isinstance(failure, ServiceUnreachableError):
        return failure.reason
    return str(failure)


def _path_id(experiment_id: str) -> str:
    from urllib.parse import quote
    if not isinstance(experiment_id, str) or not experiment_id.strip():
        raise InputError(f"experiment_id: got {experiment_id!r}; allowed is an experiment's "
                         "id, e.g. 'exp_' followed by 24 hexadecimal digits")
    return quote(experiment_id.strip(), safe="")


def _arms(arms: Sequence[str] | Mapping[str, str]) -> dict[str, str] | list[str]:
    if isinstance(arms, Mapping):
        if set(arms) != {"control", "treatment"}:
            raise InputError(f"arms: got {dict(arms)!r}; allowed is {{'control': NAME, "
                             "'treatment': NAME}")
        return {"control": str(arms["control"]), "treatment": str(arms["treatment"])}
    if isinstance(arms, (str, bytes)) or len(arms) < 2:
        raise InputError(f"arms: got {arms!r}; allowed is (control name, treatment name), "
                         "or for an experiment plan its arms' names, the control first")
    if len(arms) > 2:
        return [str(a) for a in arms]     # an experiment plan's arms
    return {"control": str(arms[0]), "treatment": str(arms[1])}


def _arm_key(name: str) -> str:
    # names compared as the look tables compare them (letter case, separators)
    from seqtest.monitoring.lookfile import name_key
    return name_key(name)


def read_table_for(exp: Experiment, frame: Any, *,
                   columns: Mapping[str, str | None] | None = None,
                   control: str | None = None) -> Any:
    """Read a table of looks (a DataFrame, either layout) for an experiment: with its
    metric kind, and with its control arm's name unless ``control`` names another (a
    table whose arms are named ``control`` and ``treatment`` is read as it is)."""
    from seqtest.core.errors import LookDataError
    from seqtest.monitoring.lookfile import read_arm_looks
    kind = exp.metric_kind or None
    if control is not None:
        return read_arm_looks(frame, kind, columns=columns, control=control)
    if isinstance(exp.arms, list) and len(exp.raw.get("metrics") or []) > 1:
        raise InputError(f"looks: experiment {exp.id} has several metrics, and a table of "
                         "looks holds one; give the looks as a list of {metric: {arm: "
                         "totals}}")
    ours = exp.control
    try:
        return read_arm_looks(frame, kind, columns=columns, control=ours)
    except LookDataError as exc:
        if exc.arm != ours or not exc.detail.startswith("control: got"):
            raise
    return read_arm_looks(frame, kind, columns=columns, control=None)


def _by_plan_arm_names(exp: Experiment, table: Any) -> list[dict[str, dict[str, Any]]]:
    """The looks of an ArmLooks keyed by an experiment plan's arm names (the data's names
    compared as the look tables compare them)."""
    ours = {_arm_key(a): a for a in exp.arms}
    names = [table.control, *table.treatments]
    unknown = [n for n in names if _arm_key(n) not in ours]
    if unknown:
        raise InputError(f"arms: got {unknown[0]!r} in the data; allowed for experiment "
                         f"{exp.id} are its arms {', '.join(exp.arms)}")
    return [{ours[_arm_key(n)]: dict(v) for n, v in look.items()} for look in table.looks]


def _by_experiment_names(exp: Experiment, table: Any) -> list[dict[str, dict[str, Any]]]:
    """The looks of an ArmLooks keyed by the experiment's arm names: the table's control
    is the experiment's control, its treatment the experiment's treatment; names must be
    the experiment's or the roles ``control`` and ``treatment``."""
    roles = table.roles()              # refuses more than one treatment
    arms = exp.arms if isinstance(exp.arms, Mapping) else {}
    ours = {"control": arms.get("control", "control"),
            "treatment": arms.get("treatment", "treatment")}
    for role, name in roles.items():
        if _arm_key(name) not in (_arm_key(ours[role]), role):
            raise InputError(
                f"arms: got {roles['control']!r} (control) and {roles['treatment']!r} in the "
                f"data; allowed for experiment {exp.id} is its arms {ours['control']!r} "
                f"(control) and {ours['treatment']!r}, or arms named control and treatment")
    return [{ours[role]: dict(look[name]) for role, name in roles.items()}
            for look in table.looks]
