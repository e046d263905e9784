"""Without a reachable PostgreSQL, its tests skip locally but fail in CI."""

from __future__ import annotations

import socket

import pytest
from service_helpers import reachable_postgres


def _closed_port_url() -> str:
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()  # nothing listens there now
    return f"postgresql://nobody@127.0.0.1:{port}/test"


def test_unreachable_postgres_fails_in_ci():
    with pytest.raises(pytest.fail.Exception, match="must run in CI"):
        reachable_postgres([_closed_port_url()], in_ci=True)


def test_unreachable_postgres_skips_outside_ci():
    with pytest.raises(pytest.skip.Exception, match="not reachable"):
        reachable_postgres([_closed_port_url()], in_ci=False)


def test_the_first_reachable_server_is_used(postgres_base: str):
    assert reachable_postgres([_closed_port_url(), postgres_base], in_ci=True) == postgres_base
