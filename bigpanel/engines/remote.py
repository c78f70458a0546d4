"""Remote Parquet (``s3://``, ``gs://``, ``https://``, ...) through DuckDB's httpfs extension, on request only.

A remote location is recognised by its scheme before anything touches the network. Without
the caller's consent (``--allow-remote``, ``allow_remote=True``) it is refused in one line
that says how to consent, and no connection is attempted. With consent the session loads
httpfs (installed beforehand: bigpanel never downloads an extension itself) and, for S3, makes
a temporary secret from the standard AWS environment variables when they are set; otherwise
DuckDB's own secrets (``CREATE PERSISTENT SECRET``) apply. Credentials are never printed,
kept among the statements of a fit, or saved: :func:`redacted` is the location as shown.
"""

from __future__ import annotations

import os
import re
from typing import Any
from urllib.parse import parse_qsl, urlencode, urlsplit, urlunsplit

from ..errors import BigPanelError
from ..sql.text import literal

# schemes DuckDB's httpfs reads; Spark reads s3a:// and hdfs:// itself (see registry.sql_engine)
REMOTE_SCHEMES = ("s3", "s3a", "s3n", "gs", "gcs", "r2", "http", "https", "hf")
OPT_IN = "add --allow-remote (allow_remote=True in Python) to read it through DuckDB's httpfs extension"
_SCHEME = re.compile(r"^([A-Za-z][A-Za-z0-9+.-]*)://")
_SECRET_KEY = re.compile(r"pass|secret|token|key|sig|credential|amz-security", re.IGNORECASE)
# the S3 secret's parameters and the environment variables they come from (the AWS names)
_AWS_ENV = {"KEY_ID": "AWS_ACCESS_KEY_ID", "SECRET": "AWS_SECRET_ACCESS_KEY", "SESSION_TOKEN": "AWS_SESSION_TOKEN",
            "REGION": "AWS_REGION", "ENDPOINT": "AWS_ENDPOINT_URL"}


def scheme(location: str) -> str | None:
    """The URL scheme of ``location`` in lower case (``s3``, ``https``, ...), or None for a path."""
    m = _SCHEME.match(str(location))
    return m.group(1).lower() if m else None


def is_remote(location: str) -> bool:
    """Whether ``location`` is a URL that DuckDB would read over the network."""
    return scheme(location) in REMOTE_SCHEMES


def redacted(location: str) -> str:
    """``location`` without what may carry a credential: the password of ``user:password@`` and the query
    parameters whose names speak of one (password, secret, token, key, signature, credential) are left
    out; a plain path as it is. What is left can be shown, saved and opened again (PostgreSQL then
    takes the password from ``PGPASSWORD`` or ``~/.pgpass``)."""
    if scheme(location) is None:
        return str(location)
    parts = urlsplit(str(location))
    netloc = parts.netloc
    if "@" in netloc:
        user, host = netloc.rsplit("@", 1)
        netloc = user.split(":", 1)[0] + "@" + host
    query = [(k, v) for k, v in parse_qsl(parts.query, keep_blank_values=True) if not _SECRET_KEY.search(k)]
    return urlunsplit((parts.scheme, netloc, parts.path, urlencode(query), parts.fragment))


def check_remote(location: str, allow_remote: bool | None) -> None:
    """Refuse a remote ``location`` unless the caller opted in; refuse a scheme DuckDB cannot read."""
    found = scheme(location)
    if found is None or found in ("postgresql", "postgres"):
        return
    if found not in REMOTE_SCHEMES:
        raise BigPanelError(f"cannot read {redacted(location)}: unknown scheme {found}:// "
                            f"(remote Parquet may be {', '.join(s + '://' for s in REMOTE_SCHEMES)})")
    if not allow_remote:
        raise BigPanelError(f"{redacted(location)} is remote and reading it needs the network: {OPT_IN}")
    if not str(location).lower().split("?", 1)[0].endswith((".parquet", ".parq", ".pq")):
        raise BigPanelError(f"{redacted(location)}: a remote source must be Parquet (a .parquet file or a glob of "
                            "them, such as s3://bucket/sales/*.parquet)")


def enable_remote(con: Any, location: str) -> None:
    """Load httpfs into the session (before its configuration is locked) and, for S3 locations with
    ``AWS_ACCESS_KEY_ID`` and ``AWS_SECRET_ACCESS_KEY`` in the environment, create a temporary secret.

    The secret's statement runs on the connection directly, never through an engine (whose
    statements are kept for reports), and a failure is reported without its text.
    """
    import duckdb

    try:
        con.execute("LOAD httpfs").fetchall()
    except duckdb.Error:
        raise BigPanelError(
            f"reading {redacted(location)} needs DuckDB's httpfs extension, which is not installed; install it once "
            "with: python -c \"import duckdb; duckdb.sql('INSTALL httpfs')\" (bigpanel never downloads extensions)"
        ) from None
    statement = s3_secret_statement(os.environ) if scheme(location) in ("s3", "s3a", "s3n", "r2") else None
    if statement is None:
        return
    try:
        con.execute(statement).fetchall()
    except duckdb.Error:
        raise BigPanelError("could not make a DuckDB secret from the AWS_* environment variables "
                            "(check AWS_ACCESS_KEY_ID, AWS_SECRET_ACCESS_KEY, AWS_REGION)") from None


def s3_secret_statement(env: dict[str, str] | os._Environ) -> str | None:
    """``CREATE TEMPORARY SECRET`` of type S3 from the AWS variables of ``env``, or None without a key pair."""
    given = {param: env[var] for param, var in _AWS_ENV.items() if env.get(var)}
    if "REGION" not in given and env.get("AWS_DEFAULT_REGION"):
        given["REGION"] = env["AWS_DEFAULT_REGION"]
    if "KEY_ID" not in given or "SECRET" not in given:
        return None
    if "ENDPOINT" in given:  # DuckDB wants the host only
        given["ENDPOINT"] = re.sub(r"^https?://", "", given["ENDPOINT"]).rstrip("/")
    body = ", ".join(f"{param} {literal(value)}" for param, value in given.items())
    return f"CREATE OR REPLACE TEMPORARY SECRET bigpanel_s3 (TYPE s3, {body})"
