#!/usr/bin/env bash
# Listing commands on a catalogue shared read-only (issue 15 item 1): the
# file and its directory are not writable by the user who reads them. Root
# ignores file permissions, so when run as root this runs the listings as
# `nobody`; otherwise as the current user.
# Usage: .ci/readonly.sh GLITCHBOOK_BINARY
set -euo pipefail
BIN=$(readlink -f "${1:?usage: readonly.sh GLITCHBOOK_BINARY}")
W=$(mktemp -d /tmp/gb-readonly.XXXXXX)
trap 'chmod -R u+w "$W" 2>/dev/null; rm -rf "$W"' EXIT
cp "$BIN" "$W/glitchbook"
chmod 755 "$W" "$W/glitchbook"
"$W/glitchbook" demo --out "$W/demo" --hours 0.1 --quiet >/dev/null
mkdir "$W/shared"
cp "$W/demo/glitchbook.db" "$W/shared/c.db"
mkdir "$W/reports"
chmod 444 "$W/shared/c.db"
chmod 555 "$W/shared"
as_reader() {
    if [ "$(id -u)" = 0 ]; then
        chmod 777 "$W/reports"
        runuser -u nobody -- "$@"
    else
        "$@"
    fi
}
sum_before=$(sha256sum "$W/shared/c.db")
for args in "triggers" "channels" "families" "rates" "check" "report --out $W/reports/r"; do
    # shellcheck disable=SC2086
    if ! as_reader "$W/glitchbook" --db "$W/shared/c.db" $args >/dev/null; then
        echo "readonly.sh: '$args' failed on a read-only catalogue" >&2
        exit 1
    fi
done
if [ "$(sha256sum "$W/shared/c.db")" != "$sum_before" ]; then
    echo "readonly.sh: the catalogue changed" >&2
    exit 1
fi
if [ "$(ls -A "$W/shared")" != "c.db" ]; then
    echo "readonly.sh: files appeared beside the catalogue: $(ls -A "$W/shared")" >&2
    exit 1
fi
echo "readonly.sh: triggers, channels, families, rates, check, report read a read-only catalogue as $( [ "$(id -u)" = 0 ] && echo nobody || id -un )"
