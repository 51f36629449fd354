"""HTTP status -> store error class (the rule of daemon/stores/base.py; common practice, no source),
and where kept lines go when raw samples and results have different targets."""

from __future__ import annotations

import threading

import pytest

from isentrope.daemon.stores import AuthorizationError, FatalStoreError, TemporaryStoreError
from isentrope.daemon.stores.influx_common import RAW, RESULTS, LineProtocolWriter, classify_http


@pytest.mark.parametrize("status", [408, 429, 500, 502, 503, 504])
def test_retryable_statuses_are_temporary(status):
    assert isinstance(classify_http(status, "busy", "write"), TemporaryStoreError)


@pytest.mark.parametrize("status", [400, 401, 403, 404, 413])
def test_other_statuses_are_fatal(status):
    err = classify_http(status, '{"error":"nope"}', "write")
    assert isinstance(err, FatalStoreError) and f"HTTP {status}" in str(err)
    assert isinstance(err, AuthorizationError) == (status in (401, 403))  # a configuration error


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


class _Writer(LineProtocolWriter):
    """A LineProtocolWriter whose server is a list; ``down`` makes every send fail for now."""

    batch_size, down = 2, False

    def __init__(self):
        self.pending: list[str] = []
        self._write_lock = threading.Lock()
        self.sent: list[tuple[str, list[str]]] = []

    def _send_batch(self, text, what, target):
        if self.down:
            raise TemporaryStoreError(f"{what}: unreachable")
        self.sent.append((target, text.split("\n")))


def test_kept_lines_go_to_their_own_target_first():
    w = _Writer()
    w.down = True
    with pytest.raises(TemporaryStoreError):
        w._write(["r1", "r2", "r3"], "write_raw", RAW)
    assert w.pending == ["r1", "r2", "r3"] and w.pending_target == RAW
    with pytest.raises(TemporaryStoreError) as err:  # still down: the new lines are handed back too
        w._write(["x1"], "save checkpoint", RESULTS)
    assert err.value.unwritten == ["r1", "r2", "r3", "x1"] and w.pending == ["r1", "r2", "r3"]
    w.down = False
    w._write(["x1"], "save checkpoint", RESULTS)  # the raw lines first, to where raw lines go
    assert w.sent == [(RAW, ["r1", "r2"]), (RAW, ["r3"]), (RESULTS, ["x1"])]
    assert w.pending == []


def test_an_influxql_answer_given_while_the_server_stops_is_an_outage():
    # influxd 1.6.7 answers "query engine shutdown" to a query that arrives while it stops
    # (seen by the fault suite's stopped-server backfill): retried, not a configuration error
    from isentrope.daemon.stores.base import FatalStoreError, TemporaryStoreError
    from isentrope.daemon.stores.influx1 import _answer_error

    assert isinstance(_answer_error("database 'x' on http://h: query engine shutdown"), TemporaryStoreError)
    assert isinstance(_answer_error("database not found: x"), FatalStoreError)
