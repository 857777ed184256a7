#!/bin/bash
# Cancel command for the stand-in scheduler of fake_submit.sh (cluster-generic
# --cluster-generic-cancel-cmd): terminates the process group of each given job id.
#
#   fake_cancel.sh JOBID [JOBID ...]
set -uo pipefail

state=${DASCREEN_FAKE_CLUSTER:-${TMPDIR:-/tmp}/dascreen-fake-cluster-$(id -u)}
for id in "$@"; do
    pid=$(cat "$state/$id.pid" 2>/dev/null || true)
    # the wrapper is a session leader (setsid), so -pid is exactly this job's process group
    # (only while it has no exit code: a finished job's pid may belong to someone else by now)
    [[ -n "$pid" && ! -f "$state/$id.rc" ]] && kill -TERM -- "-$pid" 2>/dev/null || true
done
exit 0
