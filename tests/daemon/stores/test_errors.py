"""HTTP status -> store error class (the rule of daemon/stores/base.py; common practice, no source)."""

from __future__ import annotations

import pytest

from isentrope.daemon.stores import FatalStoreError, TemporaryStoreError
from isentrope.daemon.stores.influx_common import classify_http


@pytest.mark.parametrize("status", [408, 429, 500, 502, 503, 504])
def test_retryable_statuses_are_temporary(status):
    assert isinstance(classify_http(status, "busy", "write"), TemporaryStoreError)


@pytest.mark.parametrize("status", [400, 401, 403, 404, 413])
def test_other_statuses_are_fatal(status):
    err = classify_http(status, '{"error":"nope"}', "write")
    assert isinstance(err, FatalStoreError) and f"HTTP {status}" in str(err)


@pytest.mark.parametrize(
    "body",
    [
        '{"error":"failed to initialize execute state: no database"}',
        'database not found: "x"',
        "bucket not found",
    ],
)
def test_a_missing_target_is_fatal_even_as_500(body):
    assert isinstance(classify_http(500, body, "query"), FatalStoreError)
