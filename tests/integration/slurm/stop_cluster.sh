#!/usr/bin/env bash
# Stop the cluster start_cluster.sh started in STATE_DIR, daemon by daemon, by the
# process ids it recorded (never by name), newest first. Cancels the cluster's jobs
# first. Safe to call more than once and after a partial start.
#
#   stop_cluster.sh STATE_DIR
set -uo pipefail

state="${1:?usage: stop_cluster.sh STATE_DIR}"
[ -d "$state/pids" ] || exit 0

log() { printf '[stop_cluster %(%H:%M:%S)T] %s\n' -1 "$*"; }

# Jobs still running (e.g. after a time-out) would outlive slurmd: cancel them.
if [ -f "$state/slurm.conf" ] && [ -f "$state/pids/slurmctld.pid" ]; then
    export SLURM_CONF="$state/slurm.conf"
    timeout 10 scancel --user="$(id -un)" >/dev/null 2>&1 || true
fi

# stop NAME: TERM the recorded pid, wait up to 20 s, then KILL.
stop() {
    local name="$1" pidfile="$state/pids/$1.pid" pid
    [ -f "$pidfile" ] || return 0
    pid="$(cat "$pidfile")"
    # Only signal the pid if it still belongs to that daemon (pids can be reused).
    if [ -n "$pid" ] && [ "$(cat "/proc/$pid/comm" 2>/dev/null)" = "$name" ]; then
        kill -TERM "$pid" 2>/dev/null
        for ((i = 0; i < 100; i++)); do
            kill -0 "$pid" 2>/dev/null || break
            sleep 0.2
        done
        if kill -0 "$pid" 2>/dev/null; then
            log "$name (pid $pid) ignored TERM; killing it"
            kill -KILL "$pid" 2>/dev/null
        fi
        log "stopped $name (pid $pid)"
    fi
    rm -f "$pidfile"
}

for name in slurmd slurmctld slurmdbd mariadbd munged; do
    stop "$name"
done
