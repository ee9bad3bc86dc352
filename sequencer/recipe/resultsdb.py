"""The station file's `results_database:`: a shared PostgreSQL results store besides the run folder.

    results_database: postgresql://ccbench@results.factory.example:5432/ccbench
    results_database: {url: "postgresql://ccbench@db.example/ccbench", wait_at_end: 15 s}

The run folder stays the record of truth (journal, SQLite, CSV); the shared database is fed from
the journal in the background (sequencer.store.shared.shipper). The URL may not carry a
password: the station text is copied into every run record, so the password belongs in
~/.pgpass or PGPASSWORD.
"""

from __future__ import annotations

from dataclasses import dataclass
from urllib.parse import parse_qsl, urlsplit

SCHEMES = ("postgresql", "postgres")
WAIT_AT_END_S = 15.0  # how long the end of a run waits for the last results to reach the database


@dataclass(frozen=True)
class SharedDatabase:
    url: str
    wait_at_end_s: float = WAIT_AT_END_S

    def __post_init__(self) -> None:
        problem = url_problem(self.url)
        if problem:
            raise ValueError(problem)
        if not 0 <= self.wait_at_end_s <= 600:
            raise ValueError(f"wait_at_end must be 0 to 600 s (got {self.wait_at_end_s})")

    @property
    def shown(self) -> str:
        """The URL without user and query, for the screen."""
        parts = urlsplit(self.url)
        host = parts.hostname or "local socket"
        port = f":{parts.port}" if parts.port else ""
        return f"{host}{port}{parts.path}"


# libpq reads these from a URL's query as well as from its user part (from memory: the libpq
# connection-parameter list); any of them would be copied into every run record.
SECRET_PARAMETERS = {"password", "sslpassword"}


def url_problem(url: str) -> str:
    """What is wrong with a results-database URL ('' when nothing)."""
    try:
        parts = urlsplit(url)
        parts.port  # noqa: B018 - raises ValueError on a port that is not a number
    except ValueError as exc:
        return f"is not a URL ({exc})"
    if parts.scheme not in SCHEMES:
        return f"must be a postgresql:// URL (got {url!r})"
    asked = {key.lower() for key, _ in parse_qsl(parts.query, keep_blank_values=True)}
    if parts.password or asked & SECRET_PARAMETERS:
        return (
            "must not carry a password (the station text is copied into every run record); "
            "put it in ~/.pgpass or PGPASSWORD"
        )
    if not parts.path.strip("/"):
        return f"must name the database, e.g. postgresql://ccbench@host/ccbench (got {url!r})"
    return ""
