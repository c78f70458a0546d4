"""A fit saved from PostgreSQL: no password in the file, the schema holds, and refit runs it again
(skipped with BIGPANEL_SKIP_SERVERS=1). The PostgreSQL numbers themselves are checked in test_engines."""

import json

import jsonschema
import pytest
from typer.testing import CliRunner

import bigpanel
from bigpanel.cli import app
from bigpanel.results.saved import schema
from test_engines import FORMULA, panel, pg_url  # noqa: F401 - the session's PostgreSQL server and its data

pytestmark = pytest.mark.server


def test_postgres_fit_saved_without_password_and_refit(pg_url, tmp_path):  # noqa: F811 - the fixture
    # the test server trusts local connections, so a password in the URL is ignored by it: a stand-in
    url = pg_url.replace("bigpanel@", "bigpanel:not-a-real-secret@")
    res = bigpanel.fit(url, FORMULA, fe="store", table="sales", cluster="store")
    text = res.to_json()
    assert "not-a-real-secret" not in text
    doc = json.loads(text)
    jsonschema.validate(doc, schema())
    assert doc["call"]["source"] == pg_url and doc["call"]["source_kind"] == "postgresql"
    saved = tmp_path / "pg.json"
    saved.write_text(text)
    done = CliRunner().invoke(app, ["refit", str(saved), "--quiet"])
    assert done.exit_code == 0, done.output
