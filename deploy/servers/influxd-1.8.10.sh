#!/usr/bin/env bash
# Build influxd 1.8.10 (the InfluxDB 1.x server that also serves the v2 HTTP API:
# /api/v2/write, and Flux on /api/v2/query when flux-enabled = true) from the Go module,
# into a cache directory outside the repository keyed by version. Builds only when the
# binary is missing (or is not 1.8.10); prints the binary's path on stdout, progress on stderr.
#
#   bash deploy/servers/influxd-1.8.10.sh            # -> /var/cache/isentrope/influxd-1.8.10/influxd
#   ISENTROPE_SERVER_CACHE=$HOME/.cache/isentrope bash deploy/servers/influxd-1.8.10.sh
#
# Needs: go (1.21 or later; built and tested here with go 1.26) and network access to the
# Go module proxy. No Rust: 1.8's Flux engine is pure Go.
set -euo pipefail

VERSION=1.8.10
MODULE=github.com/influxdata/influxdb/cmd/influxd
# shellcheck source=deploy/servers/cached.sh
source "$(dirname "${BASH_SOURCE[0]}")/cached.sh"

command -v go >/dev/null || { log "go is not on PATH (install Go 1.21+ first)"; exit 1; }
mkdir -p "$DEST_DIR"
tmp=$(mktemp -d "$DEST_DIR/.build.XXXXXX")
trap 'rm -rf "$tmp"' EXIT

log "building with $(go version) into $DEST_DIR (a few minutes on a cold machine)"
started=$(date +%s)
# -ldflags stamps the version that `influxd version` and the X-Influxdb-Version header report.
GOBIN="$tmp" GOFLAGS="${GOFLAGS:-} -buildvcs=false" \
    go install -trimpath -ldflags "-X main.version=$VERSION -X main.branch=$VERSION -X main.commit=module" \
    "$MODULE@v$VERSION" >&2
mv -f "$tmp/influxd" "$BIN"
log "built in $(( $(date +%s) - started )) s: $("$BIN" version)"
printf '%s\n' "$BIN"
