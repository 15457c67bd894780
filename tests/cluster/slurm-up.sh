#!/usr/bin/env bash
# slurm-up.sh STATE_DIR
#
# Starts a throw-away one-node Slurm cluster (munged + slurmctld + slurmd, all as root) whose
# config, state, spool, logs, pid files and MUNGE socket/key all live in STATE_DIR, so it never
# touches /etc/slurm, /etc/munge, /run/munge or the system's own daemons (if any) and needs no
# systemd. Progress goes to stderr; stdout gets exactly one line for the caller:
#     export SLURM_CONF=STATE_DIR/slurm.conf
# (also written to STATE_DIR/env). Stop it with slurm-down.sh STATE_DIR.
#
# Needs Debian's slurm-wlm and munge (Debian 12: Slurm 22.05.8, MUNGE 0.5.15).
# Running it again on the same STATE_DIR reuses daemons that are still alive and replaces ones
# whose pid files are stale.
#
# Optional environment:
#   SLURM_UP_TIMEOUT   seconds to wait for the node to become idle (default 60)
#   SLURM_UP_PORT      first slurmctld port to try (default 26817); slurmd uses the next one
set -euo pipefail

die() { echo "slurm-up: $*" >&2; exit 1; }
log() { echo "slurm-up: $*" >&2; }

[ $# -eq 1 ] || die "usage: $0 STATE_DIR"
[ "$(id -u)" -eq 0 ] || die "must run as root (SlurmUser=root, SlurmdUser=root)"
for tool in munged mungekey slurmctld slurmd sinfo scontrol ss; do
    command -v "$tool" >/dev/null || die "$tool not found: apt-get install slurm-wlm munge iproute2"
done

mkdir -p "$1"
STATE=$(cd "$1" && pwd -P)
HERE=$(cd "$(dirname "$0")" && pwd -P)
CONF=$STATE/slurm.conf
TIMEOUT=${SLURM_UP_TIMEOUT:-60}

# Unix socket paths are limited to 108 bytes (unix(7)); slurmd puts one socket per job step
# (HOST_JOBID.STEP) in its spool dir and munged its socket in STATE/munge, so a deep STATE_DIR
# would fail late and obscurely. Refuse it up front instead.
[ $(( ${#STATE} + 40 )) -le 107 ] || die "STATE_DIR path too long for unix sockets: $STATE"

mkdir -p "$STATE"/{munge,ctld,spool,log,run,tmp}

show_logs() {
    local f
    for f in "$STATE/munge/munged.log" "$STATE/log/slurmctld.log" "$STATE/log/slurmd.log"; do
        echo "----- $f (last 40 lines)" >&2
        tail -n 40 "$f" >&2 2>/dev/null || echo "(missing)" >&2
    done
}

# From here on any failure (including a daemon that refuses to start, which set -e turns into an
# exit) prints the daemons' logs and stops whatever was started, so no half cluster is left.
up_ok=0
on_exit() {
    local rc=$?
    [ "$up_ok" -eq 1 ] && return 0
    echo "slurm-up: failed (exit $rc)" >&2
    show_logs
    "$HERE/slurm-down.sh" "$STATE" >&2 || true
    exit $(( rc == 0 ? 1 : rc ))
}
trap on_exit EXIT
# munged refuses a key/socket directory that group or others can write (MUNGE's own checks),
# and warns unless everyone may traverse the socket's directory: 0711 satisfies both.
chmod 0711 "$STATE/munge"

# alive NAME PIDFILE: true when PIDFILE names a live process called NAME whose command line
# mentions STATE (so a system daemon or another cluster's daemon is never mistaken for ours).
alive() {
    local pid
    [ -s "$2" ] || return 1
    pid=$(cat "$2")
    [ -r "/proc/$pid/comm" ] || return 1
    [ "$(cat "/proc/$pid/comm")" = "$1" ] || return 1
    tr '\0' ' ' <"/proc/$pid/cmdline" | grep -qF "$STATE"
}

# port_free PORT: nothing listens on PORT (ss is in iproute2, present on Debian by default).
port_free() { ! ss -Htln "sport = :$1" | grep -q .; }

HOST=$(hostname -s)
MUNGE_SOCK=$STATE/munge/munge.socket
CTLD_PID=$STATE/run/slurmctld.pid
SLURMD_PID=$STATE/run/slurmd.pid
MUNGE_PID=$STATE/munge/munged.pid

if alive munged "$MUNGE_PID" && alive slurmctld "$CTLD_PID" && alive slurmd "$SLURMD_PID" \
    && [ -s "$CONF" ]; then
    log "daemons already running for $STATE, reusing them"
else
    # Something is missing or stale: stop whatever of ours is still alive, then start clean.
    "$HERE/slurm-down.sh" "$STATE" >&2 || true
    rm -f "$CTLD_PID" "$SLURMD_PID" "$MUNGE_PID"

    # ---- MUNGE: own key, socket, pid, log and seed inside STATE (munged --help lists the flags).
    if [ ! -s "$STATE/munge/munge.key" ]; then
        mungekey --create --keyfile="$STATE/munge/munge.key"
    fi
    chmod 0600 "$STATE/munge/munge.key"
    # --force: start even if a stale socket file is left over or a check only warns.
    munged --force \
        --socket="$MUNGE_SOCK" \
        --key-file="$STATE/munge/munge.key" \
        --pid-file="$MUNGE_PID" \
        --log-file="$STATE/munge/munged.log" \
        --seed-file="$STATE/munge/munged.seed"
    munge --socket="$MUNGE_SOCK" -n | unmunge --socket="$MUNGE_SOCK" >/dev/null \
        || die "munged does not answer on $MUNGE_SOCK; log: $(cat "$STATE/munge/munged.log")"

    # ---- slurm.conf (keys from the slurm.conf(5) man page of Slurm 22.05).
    port=${SLURM_UP_PORT:-26817}
    for _ in $(seq 20); do
        if port_free "$port" && port_free $((port + 1)); then break; fi
        port=$((port + 2))
    done
    if ! { port_free "$port" && port_free $((port + 1)); }; then
        die "no free port pair found near ${SLURM_UP_PORT:-26817}"
    fi
    cpus=$(nproc)
    # RealMemory must not exceed what slurmd detects, or the node is drained as "Low RealMemory".
    mem_mb=$(( $(awk '/^MemTotal:/ {print $2}' /proc/meminfo) / 1024 ))
    real_mem=$(( mem_mb < 2048 ? mem_mb / 2 : 1024 ))
    cat >"$CONF" <<EOF
# Written by tests/cluster/slurm-up.sh for a throw-away one-node test cluster.
ClusterName=spurion-test
# NodeAddr/SlurmctldHost address pinned to loopback: no dependence on how the hostname resolves.
SlurmctldHost=$HOST(127.0.0.1)
SlurmctldPort=$port
SlurmdPort=$((port + 1))
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
# Our own munged's socket instead of /run/munge/munge.socket.2 (used by auth/ and cred/munge).
AuthInfo=socket=$MUNGE_SOCK
# No cgroups: the sandbox/CI machine has no systemd and a hybrid cgroup mount.
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
MpiDefault=none
SwitchType=switch/none
# Bring a node back to service on its own after a restart (or after "not responding").
ReturnToService=2
# Trust the CPUs/RealMemory written here even if slurmd's probe sees a different topology.
SlurmdParameters=config_overrides
MailProg=/bin/true
StateSaveLocation=$STATE/ctld
SlurmdSpoolDir=$STATE/spool
SlurmctldPidFile=$CTLD_PID
SlurmdPidFile=$SLURMD_PID
SlurmctldLogFile=$STATE/log/slurmctld.log
SlurmdLogFile=$STATE/log/slurmd.log
SlurmctldDebug=info
SlurmdDebug=info
TmpFS=$STATE/tmp
# Short timeouts so a test never waits long on a dead daemon; jobs stay visible 5 min for --wait.
SlurmctldTimeout=30
SlurmdTimeout=30
MessageTimeout=10
KillWait=5
MinJobAge=300
NodeName=$HOST NodeAddr=127.0.0.1 NodeHostname=$HOST CPUs=$cpus RealMemory=$real_mem State=UNKNOWN
PartitionName=debug Nodes=$HOST Default=YES MaxTime=INFINITE State=UP
EOF

    # ---- daemons. -f: this conf; slurmctld -c: forget job/node state of an earlier run.
    : >"$STATE/log/slurmctld.log"
    : >"$STATE/log/slurmd.log"
    slurmctld -f "$CONF" -c
    slurmd -f "$CONF" -N "$HOST"
fi

# Wait until the node reports idle. sinfo fails while slurmctld is not yet listening.
start=$SECONDS
state=""
while [ $((SECONDS - start)) -lt "$TIMEOUT" ]; do
    state=$(SLURM_CONF=$CONF sinfo -h -n "$HOST" -o %t 2>/dev/null || true)
    [ "$state" = "idle" ] && break
    for d in slurmctld:"$CTLD_PID" slurmd:"$SLURMD_PID" munged:"$MUNGE_PID"; do
        if [ $((SECONDS - start)) -gt 5 ] && ! alive "${d%%:*}" "${d#*:}"; then
            echo "slurm-up: ${d%%:*} is not running" >&2
            exit 1
        fi
    done
    sleep 0.5
done
if [ "$state" != "idle" ]; then
    echo "slurm-up: node $HOST not idle after ${TIMEOUT}s (state: '${state:-no answer}')" >&2
    SLURM_CONF=$CONF scontrol show node "$HOST" >&2 2>/dev/null || true
    exit 1
fi
log "node $HOST idle after $((SECONDS - start))s"

echo "export SLURM_CONF=$CONF" >"$STATE/env"
up_ok=1
cat "$STATE/env"
