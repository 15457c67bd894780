#!/usr/bin/env bash
# slurm-down.sh STATE_DIR
#
# Stops the cluster that slurm-up.sh STATE_DIR started: cancels its jobs, stops slurmd,
# slurmctld and munged by the pid files in STATE_DIR (only processes whose command line names
# STATE_DIR, so a system Slurm/MUNGE or another test's cluster is left alone), and waits until
# they, and the slurmstepd processes of that cluster's jobs, are gone. Safe to run when nothing
# is running. Keeps STATE_DIR (logs are useful after a failure); delete it yourself.
set -euo pipefail

[ $# -eq 1 ] || { echo "usage: $0 STATE_DIR" >&2; exit 2; }
[ -d "$1" ] || exit 0
STATE=$(cd "$1" && pwd -P)
CONF=$STATE/slurm.conf

# ours NAME PIDFILE -> prints the pid when it is a live NAME process started for STATE.
ours() {
    local pid
    [ -s "$2" ] || return 1
    pid=$(cat "$2")
    [ -r "/proc/$pid/comm" ] && [ "$(cat "/proc/$pid/comm" 2>/dev/null)" = "$1" ] || return 1
    tr '\0' ' ' <"/proc/$pid/cmdline" 2>/dev/null | grep -qF "$STATE" || return 1
    echo "$pid"
}

# stepds: pids of slurmstepd processes of this cluster. Their command line is only
# "slurmstepd: [JOB.STEP]", so tell them apart by their slurmd parent's spool dir: each stepd
# keeps a unix socket named SPOOL/HOST_JOB.STEP open, visible in /proc/net/unix.
stepds() {
    local p fd link inodes
    # " ino ino ... " of the unix sockets bound under our spool dir (column 7 of /proc/net/unix)
    inodes=$({ grep -F "$STATE/spool/" /proc/net/unix || true; } | awk '{print $7}' | tr '\n' ' ')
    [ -n "${inodes// /}" ] || return 0
    inodes=" $inodes"
    for p in /proc/[0-9]*; do
        [ "$(cat "$p/comm" 2>/dev/null)" = slurmstepd ] || continue
        for fd in "$p"/fd/*; do
            link=$(readlink "$fd" 2>/dev/null) || continue
            case "$link" in socket:\[*\]) ;; *) continue ;; esac
            link=${link#socket:[}
            case "$inodes" in *" ${link%]} "*) echo "${p#/proc/}"; break ;; esac
        done
    done
}

# descendants PID...: the given pids and all their descendants (a job's processes hang below its
# slurmstepd with proctrack/linuxproc; they must go too if the controller could not cancel them).
descendants() {
    local all="" next="$*" p kids
    while [ -n "${next// /}" ]; do
        all="$all $next"
        kids=""
        for p in $next; do
            kids="$kids $(awk -v pp="$p" '{ sub(/^.*\) /, ""); split($0, f, " "); if (f[2] == pp) print FILENAME }' \
                /proc/[0-9]*/stat 2>/dev/null | sed 's#^/proc/##; s#/stat$##' | tr '\n' ' ')"
        done
        next=$kids
    done
    echo "$all"
}

# running PID: the process exists and is not a zombie. A killed daemon's parent is init
# (here the sandbox's own PID 1), which reaps late, so /proc/PID alone would linger.
running() {
    [ -r "/proc/$1/stat" ] || return 1
    [ "$(sed 's/^.*) \(.\).*$/\1/' "/proc/$1/stat" 2>/dev/null)" != Z ]
}

# wait_gone SECONDS PID...: true once none of the PIDs is running.
wait_gone() {
    local t=$1 p left
    shift
    for _ in $(seq $((t * 10))); do
        left=0
        for p in "$@"; do running "$p" && left=1; done
        [ "$left" -eq 0 ] && return 0
        sleep 0.1
    done
    return 1
}

ctld=$(ours slurmctld "$STATE/run/slurmctld.pid" || true)
slurmd=$(ours slurmd "$STATE/run/slurmd.pid" || true)
munged=$(ours munged "$STATE/munge/munged.pid" || true)

# 1. Cancel this cluster's jobs while the controller still runs, so slurmd kills their steps.
if [ -n "$ctld" ] && [ -s "$CONF" ]; then
    jobs=$(SLURM_CONF=$CONF timeout 10 squeue -h -o %F 2>/dev/null | sort -u || true)
    if [ -n "$jobs" ]; then
        # shellcheck disable=SC2086 # one job id per word
        SLURM_CONF=$CONF timeout 10 scancel --full $jobs 2>/dev/null || true
        for _ in $(seq 50); do
            [ -z "$(SLURM_CONF=$CONF timeout 5 squeue -h -o %F 2>/dev/null || true)" ] && break
            sleep 0.2
        done
    fi
fi
steps=$(stepds | tr '\n' ' ')
# shellcheck disable=SC2086 # pid lists are space-separated words
[ -z "${steps// /}" ] || steps=$(descendants $steps)

# 2. SIGTERM is each daemon's documented clean shutdown; escalate to SIGKILL after 10 s.
for pid in $slurmd $ctld $steps; do kill -TERM "$pid" 2>/dev/null || true; done
# shellcheck disable=SC2086
if ! wait_gone 10 $slurmd $ctld $steps; then
    for pid in $slurmd $ctld $steps; do kill -KILL "$pid" 2>/dev/null || true; done
    wait_gone 5 $slurmd $ctld $steps || true
fi

# 3. munged last: slurmd/slurmctld talk to it while shutting down.
if [ -n "$munged" ]; then
    kill -TERM "$munged" 2>/dev/null || true
    wait_gone 10 "$munged" || { kill -KILL "$munged" 2>/dev/null || true; wait_gone 5 "$munged" || true; }
fi

rm -f "$STATE/run/slurmctld.pid" "$STATE/run/slurmd.pid" "$STATE/munge/munged.pid"

left=""
for pid in $slurmd $ctld $munged $steps; do running "$pid" && left="$left $pid"; done
left="$left $(stepds | tr '\n' ' ')"
if [ -n "${left// /}" ]; then
    echo "slurm-down: processes still running:$left" >&2
    exit 1
fi
echo "slurm-down: stopped cluster in $STATE" >&2
