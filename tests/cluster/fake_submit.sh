#!/bin/bash
# Stand-in for a batch scheduler's submit command, used by tests/test_cluster.py through
# profiles/local-generic (Snakemake's cluster-generic executor). Not for production use.
#
#   fake_submit.sh JOBSCRIPT   -> prints a job id on standard output and returns at once
#
# Like sbatch it spools a copy of the jobscript and runs that copy later as a detached process
# (own session, stdin/stdout closed) in a *fresh* environment: only PATH=/usr/bin:/bin, HOME and
# LANG are set, so no virtualenv PATH, PYTHONPATH, conda variables or Python state of the
# submitting process reach the job. A job therefore succeeds only if its jobscript is
# self-contained (absolute interpreter path, absolute file paths, its own working directory).
# HOME is the fake node's own, $state/home (empty at first): the caches a job writes (Snakemake's
# source cache, matplotlib's) stay out of the user's ~/.cache, as the tests' own runs do
# (tests/conftest.py).
#
# State (spooled scripts, exit codes, job output, each job's environment) lives in
# $DASCREEN_FAKE_CLUSTER (default: ${TMPDIR:-/tmp}/dascreen-fake-cluster-<uid>); fake_status.sh and
# fake_cancel.sh read it.
set -euo pipefail

jobscript=${1:?usage: fake_submit.sh JOBSCRIPT}
state=${DASCREEN_FAKE_CLUSTER:-${TMPDIR:-/tmp}/dascreen-fake-cluster-$(id -u)}
mkdir -p "$state" "$state/home"

# a unique id: the counter file is only touched under flock, so parallel submissions never clash
exec 9>>"$state/.counter.lock"
flock 9
n=$(( $(cat "$state/.counter" 2>/dev/null || echo 0) + 1 ))
echo "$n" > "$state/.counter"
flock -u 9
exec 9>&-
id="fake-$n"

cp "$jobscript" "$state/$id.sh"    # the spooled copy is all the job gets

# The wrapper runs with the submitter's environment only to record the exit code; the job itself
# runs under `env -i`. setsid: own session and process group, like a job on another node.
setsid bash -c '
    state=$1; id=$2; home=$3
    echo $$ > "$state/$id.pid"
    cd /
    env -i PATH=/usr/bin:/bin HOME="$home" LANG=C.UTF-8 \
        bash -c "env > \"\$0\"; exec bash \"\$1\"" "$state/$id.env" "$state/$id.sh" \
        > "$state/$id.out" 2>&1
    rc=$?
    echo "$rc" > "$state/$id.rc.tmp" && mv "$state/$id.rc.tmp" "$state/$id.rc"
' fake-job "$state" "$id" "$state/home" < /dev/null > /dev/null 2>&1 &

echo "$id"
