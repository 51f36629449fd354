#!/usr/bin/env bash
# Build influxd 2.9.1 (the InfluxDB 2.x server: organisations, buckets, token authorisation,
# /api/v2/write, /api/v2/query with current Flux, /api/v2/delete, and the v1 compatibility
# endpoints /write and /query) from the Go module, into a cache directory outside the repository
# keyed by version. Builds only when the binary is missing (or is not 2.9.1); prints the binary's
# path on stdout, progress on stderr.
#
#   bash deploy/servers/influxd-2.9.1.sh            # -> /var/cache/isentrope/influxd-2.9.1/influxd
#   ISENTROPE_SERVER_CACHE=$HOME/.cache/isentrope bash deploy/servers/influxd-2.9.1.sh
#
# Needs: go 1.25.10 or later (built and tested here with go 1.26), cargo with a stable Rust
# toolchain (the Flux engine of 2.x is a Rust library linked into the Go binary; built here with
# Rust 1.95), a C compiler, and network access to the Go module proxy and crates.io.
# Measured with empty Go module, Go build and cargo caches (go 1.26.8, Rust 1.95, 2 cores): 1330 s
# of CPU (user + system), so at least 11 minutes on an idle 2-core machine; 58 minutes of wall
# time while other jobs held the load average at 8-12. 1.7 GB peak memory (resident); 3.4 GB of
# caches (Go modules 1.5 GB, Go build cache with the Flux library 1.8 GB, cargo registry 72 MB).
# With the binary cached: 0.3 s.
#
# Why 2.9.1: of the 2.x versions the module proxy serves, it is the newest that builds with the
# Go release installed on the CI machine without fetching another toolchain (2.10.x asks for
# go 1.26.11), and it carries a current Flux (v0.200.0). 2.7.12 is listed too but carries an
# older Flux (v0.196.1) than what plants installing 2.x today get. The proxy serves 2.9.1 when
# asked by version although its version list does not show it; go.sum checks what it serves.
#
# `go install module@version` is refused (the module's go.mod has replace directives), so the
# module is copied somewhere writable and built in place. No `assets` tag: the API without the
# web UI, which the tests do not need.
set -euo pipefail

VERSION=2.9.1
MODULE=github.com/influxdata/influxdb/v2
# shellcheck source=deploy/servers/cached.sh
source "$(dirname "${BASH_SOURCE[0]}")/cached.sh"

if ! command -v go >/dev/null && [[ -x /usr/local/go/bin/go ]]; then PATH="$PATH:/usr/local/go/bin"; fi
if ! command -v cargo >/dev/null && [[ -x "$HOME/.cargo/bin/cargo" ]]; then PATH="$PATH:$HOME/.cargo/bin"; fi
command -v go >/dev/null || { log "go is not on PATH (install Go 1.25.10+ first)"; exit 1; }
command -v cargo >/dev/null || { log "cargo is not on PATH (install a stable Rust toolchain first)"; exit 1; }
mkdir -p "$DEST_DIR"
tmp=$(mktemp -d "$DEST_DIR/.build.XXXXXX")
trap 'chmod -R u+w "$tmp" 2>/dev/null; rm -rf "$tmp"' EXIT

log "building with $(go version) and $(cargo --version) into $DEST_DIR (11 minutes or more cold)"
started=$(date +%s)
export GOFLAGS="${GOFLAGS:-} -buildvcs=false"
# The module's own toolchain pin (rust-toolchain) names a Rust release that rustup may not be
# able to fetch; any current stable compiles the Flux library. --cap-lints=warn keeps a lint that
# a newer compiler turned into an error from stopping the build.
export RUSTUP_TOOLCHAIN=${RUSTUP_TOOLCHAIN:-stable}
export RUSTFLAGS="${RUSTFLAGS:-} --cap-lints=warn"

src_dir=$(go mod download -json "$MODULE@v$VERSION" |
    python3 -c 'import json, sys; d = json.load(sys.stdin); sys.exit(d.get("Error")) if d.get("Error") else print(d["Dir"])')
cp -r "$src_dir" "$tmp/src"
chmod -R u+w "$tmp/src"
cd "$tmp/src"
go mod download >&2

# pkg-config wrapper at the version go.mod names: it builds the Rust Flux library with cargo and
# answers the cgo pkg-config queries for it.
log "pkg-config wrapper $(go list -m -f '{{.Version}}' github.com/influxdata/pkg-config)"
go build -o "$tmp/bin/pkg-config" github.com/influxdata/pkg-config >&2

log "go build ./cmd/influxd (builds the Flux library first)"
# -ldflags stamps the version that `influxd version` and the X-Influxdb-Version header report.
PKG_CONFIG="$tmp/bin/pkg-config" go build -trimpath \
    -ldflags "-X main.version=v$VERSION -X main.commit=module -X main.date=$(date -u +%Y-%m-%dT%H:%M:%SZ)" \
    -o "$tmp/influxd" ./cmd/influxd >&2
cd /
mv -f "$tmp/influxd" "$BIN"
log "built in $(( $(date +%s) - started )) s: $("$BIN" version)"
printf '%s\n' "$BIN"
