"""Stores for the fault suite: one fresh database (bucket, SQLite file) per test, and the
[store] table of a configuration that opens the same place.

Kinds: ``sqlite``; ``influx1-1.6`` (InfluxQL on Debian's influxd 1.6.7); ``influx2-1.8``
(line protocol on /api/v2/write, Flux on influxd 1.8.10); ``influx2-2.9`` (Flux, InfluxDB 2.9.1
with a token of that bucket); ``influx1-2.9`` (the v1 /write and /query of InfluxDB 2.9.1).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import worker_support as ws

from isentrope.daemon.stores import open_store

KINDS = ["sqlite", "influx1-1.6", "influx2-1.8", "influx2-2.9", "influx1-2.9"]

#: The environment of the configurations written here: the token is given as ${...}.
TOKEN_ENV = "ISENTROPE_FAULT_TOKEN"


@dataclasses.dataclass
class StorePlace:
    kind: str  # one of KINDS
    options: dict  # open_store(kind.split("-")[0], **options)
    toml: str  # the [store] table of a configuration for the same place
    environ: dict  # what the configuration's ${...} needs
    server: object = None

    @property
    def store_kind(self) -> str:
        return self.kind.split("-")[0]

    def open(self, **overrides):
        return open_store(self.store_kind, **{**self.options, **overrides})


def store_place(request, kind: str, tmp_path: Path, prefix: str = "faults") -> StorePlace:
    """A fresh place to store a unit's data, of ``kind`` (servers are the session fixtures)."""
    if kind == "sqlite":
        path = tmp_path / f"{prefix}.sqlite"
        return StorePlace(kind, {"path": path}, ws.store_toml("sqlite", path=str(path)), {})
    if kind == "influx1-1.6" or kind == "influx2-1.8":
        server = request.getfixturevalue("influxdb_v1" if kind == "influx1-1.6" else "influxdb_v2")
        db = server.new_database(prefix)
        if kind == "influx1-1.6":
            opts = {"url": server.url, "database": db, "timeout": 30}
            return StorePlace(
                kind, opts, ws.store_toml("influx1", url=server.url, database=db, timeout="30s"), {}, server
            )
        bucket = server.bucket(db)
        opts = {"url": server.url, "org": "-", "bucket": bucket, "token": "", "timeout": 30}
        toml = ws.store_toml(
            "influx2", url=server.url, org="-", bucket=bucket, token="${" + TOKEN_ENV + "}", timeout="30s"
        )
        return StorePlace(kind, opts, toml, {TOKEN_ENV: "isentrope:unused"}, server)
    server = request.getfixturevalue("influxdb_2x")
    bucket, bucket_id = server.new_bucket(prefix)
    token = server.new_token(f"{prefix} faults", read=(bucket_id,), write=(bucket_id,))
    env = {TOKEN_ENV: token}
    if kind == "influx2-2.9":
        opts = {"url": server.url, "org": server.ORG, "bucket": bucket, "token": token, "timeout": 30}
        toml = ws.store_toml(
            "influx2",
            url=server.url,
            org=server.ORG,
            bucket=bucket,
            token="${" + TOKEN_ENV + "}",
            timeout="30s",
        )
        return StorePlace(kind, opts, toml, env, server)
    opts = {
        "url": server.url,
        "database": bucket,
        "retention_policy": "autogen",
        "token": token,
        "timeout": 30,
    }
    toml = ws.store_toml(
        "influx1",
        url=server.url,
        database=bucket,
        retention_policy="autogen",
        token="${" + TOKEN_ENV + "}",
        timeout="30s",
    )
    return StorePlace(kind, opts, toml, env, server)
