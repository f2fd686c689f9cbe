#!/usr/bin/env bash
# Writes the seed scripts of the tail_dir target (fuzz/corpus/tail_dir/). The format is in
# fuzz_targets/tail_dir.rs: segments separated by 0xFF, a command byte, then a payload.
# Handy command bytes: a/i/q append to exp-0/1/2.csv, b overwrites exp-0.csv in place,
# c replaces it atomically, d deletes it, e renames it over exp-1.csv, f lets the seal period
# pass, g restarts the tailer from its state. The other targets' seeds are plain files.
set -euo pipefail
cd "$(dirname "$0")/corpus/tail_dir"
S=$'\xff'
H='Timestamp,FI-2011,TI-2050\n'
R1='2026-12-01T00:00:00Z,38.5,63.4\n'
R2='2026-12-01T00:01:00Z,38.6,63.5\n'
R3='2026-12-01T00:02:00Z,38.4,63.3\n'
w() { local name=$1; shift; printf "$@" > "$name"; }
# Appends with a partial row completed later, a quiet period and a restart.
w append-partial "a${H}${R1}${S}a2026-12-01T00:01:00Z,3${S}a8.6,63.5\\n${S}f${S}g${S}a${R3}"
# Rotation by rename: the current file becomes exp-1.csv, a new exp-0.csv starts.
w rotate-rename "a${H}${R1}${R2}${S}e${S}a${H}${R3}${S}f${S}f"
# Copy-truncate: a copy appears as exp-1.csv, exp-0.csv is truncated to its header.
w copy-truncate "a${H}${R1}${R2}${S}i${H}${R1}${R2}${S}b${H}${S}a${R3}${S}f"
# Atomic replacement with a superset, then with different content.
w atomic-replace "a${H}${R1}${S}c${H}${R1}${R2}${S}c${H}${R3}${S}g"
# CRLF with a byte order mark, a NUL hole, deletion and re-creation.
w crlf-bom-nul "a\\xef\\xbb\\xbf${H//\\n/\\r\\n}${R1//\\n/\\r\\n}${S}a\\x00\\x00\\x00\\x00${R2}${S}d${S}a${H}${R3}${S}f${S}g"
# A header only, an unterminated header, a record over the limit.
w header-only "a${H}${S}qTimestamp,FI${S}q-2011\\n${R1}${S}a2026-12-01T00:03:00Z,\"$(printf 'x%.0s' $(seq 1 200))\"\\n${R3}"
