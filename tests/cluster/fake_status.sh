#!/bin/bash
# Status command for the stand-in scheduler of fake_submit.sh (cluster-generic
# --cluster-generic-status-cmd): prints exactly one of running, success, failed.
#
#   fake_status.sh JOBID
set -uo pipefail

id=${1:?usage: fake_status.sh JOBID}
state=${DASCREEN_FAKE_CLUSTER:-${TMPDIR:-/tmp}/dascreen-fake-cluster-$(id -u)}

if [[ -f "$state/$id.rc" ]]; then
    if [[ "$(cat "$state/$id.rc")" == 0 ]]; then echo success; else echo failed; fi
elif [[ -f "$state/$id.sh" ]]; then
    pid=$(cat "$state/$id.pid" 2>/dev/null || true)
    # spooled but its wrapper vanished without an exit code (killed): the job is lost
    if [[ -n "$pid" ]] && ! kill -0 "$pid" 2>/dev/null && [[ ! -f "$state/$id.rc" ]]; then
        echo failed
    else
        echo running
    fi
else
    echo failed   # unknown job id
fi
