"""Fixtures every test folder may use: the session's throwaway PostgreSQL server."""

from tests.support.postgres import pg_server, pg_url

__all__ = ["pg_server", "pg_url"]
