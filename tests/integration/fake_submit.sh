#!/usr/bin/env bash
# A stand-in for a batch scheduler's submit command: records the resources a
# job asked for, then runs its job script synchronously on this machine.
set -euo pipefail
log="$1"; rule="$2"; mem="$3"; shift 3
echo "$rule mem_mb=$mem" >> "$log"
bash "$@"
