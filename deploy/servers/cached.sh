# Sourced by the build scripts of this folder once VERSION is set: the version-keyed cache
# directory outside the repository (ISENTROPE_SERVER_CACHE, default /var/cache/isentrope), the
# binary's path BIN, a log function (progress on stderr), and an early exit that prints BIN when
# the binary there is already this version.
CACHE_ROOT=${ISENTROPE_SERVER_CACHE:-/var/cache/isentrope}
DEST_DIR="$CACHE_ROOT/influxd-$VERSION"
BIN="$DEST_DIR/influxd"

log() { printf '%s\n' "influxd-$VERSION: $*" >&2; }

if [[ -x "$BIN" ]] && "$BIN" version 2>/dev/null | grep -q "v$VERSION"; then
    log "cached: $BIN"
    printf '%s\n' "$BIN"
    exit 0
fi
