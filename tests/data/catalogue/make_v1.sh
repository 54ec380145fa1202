#!/bin/sh
# Rebuild v1.db: a schema-version-1 catalogue made by glitchbook 0.1.0 at
# commit "catalogue: scan/import writes..." (MIGRATIONS = [0001_init]) with
# three imported triggers. Only meaningful with a build whose schema version
# is 1; later builds must keep opening (and migrating) the stored file.
# Usage: tests/data/catalogue/make_v1.sh path/to/glitchbook
set -eu
BIN=${1:?path to the glitchbook binary}
cd "$(dirname "$0")"
rm -f v1.db v1.db-wal v1.db-shm
"$BIN" --db v1.db import v1_triggers.csv --channel "Z1:FIXTURE-STRAIN" --segments v1_segments.txt
"$BIN" --db v1.db import v1_triggers.csv --channel "Z1:FIXTURE-AUX" --role aux
# Leave a self-contained file (no -wal) in rollback-journal mode.
python3 -c "import sqlite3; c=sqlite3.connect('v1.db'); c.execute('PRAGMA journal_mode=DELETE'); c.close()"
