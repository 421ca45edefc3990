#!/usr/bin/env bash
# Start a throw-away single-node SLURM cluster on this machine.
#
#   start_cluster.sh STATE_DIR
#
# Starts munged, MariaDB, slurmdbd, slurmctld and slurmd, in that order, each in the
# foreground of a background job so that its process id is known; every id is written
# to STATE_DIR/pids/<daemon>.pid the moment the daemon is started, so stop_cluster.sh
# can stop exactly what was started even when a later step fails. All configuration,
# sockets, databases, spool folders and logs live under STATE_DIR; nothing under /etc
# or /var is touched. Writes STATE_DIR/env.sh, which exports SLURM_CONF for clients and
# puts STATE_DIR/bin (an srun wrapper, see below) first on PATH.
#
# Must run as root (the daemons and the jobs run as root). The Debian packages
# slurmctld slurmd slurm-client munge slurmdbd mariadb-server must be installed
# (run_slurm_check.sh installs them).
#
# Settings (environment):
#   LAMELLUME_SLURM_PORT_BASE  first of four TCP ports on 127.0.0.1 (default 16810):
#                               +0 MariaDB, +1 slurmdbd, +2 slurmctld, +3 slurmd
#   LAMELLUME_SLURM_PARTITION  partition name (default: debug)
#   LAMELLUME_SLURM_ACCOUNT    account added for the calling user (default: lamellume)
#   LAMELLUME_SLURM_CPUS       CPUs of the node (default: 2)
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
state="${1:?usage: start_cluster.sh STATE_DIR}"
state="$(mkdir -p "$state" && cd "$state" && pwd)"

port_base="${LAMELLUME_SLURM_PORT_BASE:-16810}"
db_port=$((port_base + 0))
dbd_port=$((port_base + 1))
ctld_port=$((port_base + 2))
slurmd_port=$((port_base + 3))
partition="${LAMELLUME_SLURM_PARTITION:-debug}"
account="${LAMELLUME_SLURM_ACCOUNT:-lamellume}"
cpus="${LAMELLUME_SLURM_CPUS:-2}"
cluster="lamellume"
db_name="slurm_acct_db"
db_user="slurm"
db_pass="$(head -c 12 /dev/urandom | od -An -tx1 | tr -d ' \n')"

# Node memory: 80 % of the machine's, in MB (bookkeeping only; nothing enforces it).
mem_total_kb="$(awk '/^MemTotal:/ {print $2}' /proc/meminfo)"
real_memory=$((mem_total_kb * 8 / 10 / 1024))
def_mem_per_cpu=1000

log() { printf '[start_cluster %(%H:%M:%S)T] %s\n' -1 "$*"; }
die() { log "ERROR: $*"; exit 1; }

[ "$(id -u)" -eq 0 ] || die "must run as root"
for tool in munged mungekey mariadbd mariadb-install-db mariadb mariadb-admin slurmdbd slurmctld slurmd \
            sacctmgr sinfo srun; do
    command -v "$tool" >/dev/null || die "$tool not found; install the SLURM packages first"
done

for port in "$db_port" "$dbd_port" "$ctld_port" "$slurmd_port"; do
    if (exec 3<>"/dev/tcp/127.0.0.1/$port") 2>/dev/null; then
        die "port $port is in use (another cluster?); set LAMELLUME_SLURM_PORT_BASE"
    fi
done

mkdir -p "$state"/{bin,pids,run,log,munge,mysql,slurmctld,slurmd}
chmod 0755 "$state/munge"

# start NAME LOGFILE COMMAND... : run COMMAND in the background, record its pid.
start() {
    local name="$1" logfile="$2"
    shift 2
    "$@" </dev/null >>"$logfile" 2>&1 &
    echo $! >"$state/pids/$name.pid"
    log "started $name (pid $!)"
}

# wait_for WHAT SECONDS PIDNAME COMMAND... : poll COMMAND until it succeeds; fail early
# when the daemon PIDNAME has died.
wait_for() {
    local what="$1" limit="$2" name="$3"
    shift 3
    local pid
    pid="$(cat "$state/pids/$name.pid")"
    local deadline=$((SECONDS + limit))
    while ((SECONDS < deadline)); do
        if "$@" >/dev/null 2>&1; then
            return 0
        fi
        kill -0 "$pid" 2>/dev/null || die "$name exited while waiting for $what; see $state/log/"
        sleep 0.5
    done
    die "timed out after ${limit}s waiting for $what; see $state/log/"
}

fill() {  # fill TEMPLATE OUTPUT: replace the @NAME@ fields of a config template
    sed -e "s|@STATE@|$state|g" \
        -e "s|@CLUSTER@|$cluster|g" \
        -e "s|@PARTITION@|$partition|g" \
        -e "s|@CPUS@|$cpus|g" \
        -e "s|@REAL_MEMORY@|$real_memory|g" \
        -e "s|@DEF_MEM_PER_CPU@|$def_mem_per_cpu|g" \
        -e "s|@CTLD_PORT@|$ctld_port|g" \
        -e "s|@SLURMD_PORT@|$slurmd_port|g" \
        -e "s|@DBD_PORT@|$dbd_port|g" \
        -e "s|@DB_PORT@|$db_port|g" \
        -e "s|@DB_USER@|$db_user|g" \
        -e "s|@DB_PASS@|$db_pass|g" \
        -e "s|@DB_NAME@|$db_name|g" \
        "$1" >"$2"
}

fill "$here/slurm.conf.in" "$state/slurm.conf"
( umask 077 && fill "$here/slurmdbd.conf.in" "$state/slurmdbd.conf" )
export SLURM_CONF="$state/slurm.conf"

# Inside a job, snakemake-executor-plugin-slurm-jobstep starts the rule with srun after
# removing every SLURM_* variable, SLURM_CONF included (plugin issue #164), so srun
# would look for /etc/slurm/slurm.conf. Real clusters keep their config there (or run
# configless); this cluster's config stays in STATE_DIR, so an srun first on PATH puts
# SLURM_CONF back. SLURM passes PATH on to the jobs.
cat >"$state/bin/srun" <<EOF
#!/bin/sh
SLURM_CONF="$SLURM_CONF" exec "$(command -v srun)" "\$@"
EOF
chmod +x "$state/bin/srun"
cat >"$state/env.sh" <<EOF
export SLURM_CONF="$SLURM_CONF"
export PATH="$state/bin:\$PATH"
EOF

# 1. munge: a fresh key for this cluster only, on a private socket.
mungekey --create --keyfile="$state/munge/munge.key"
chmod 0400 "$state/munge/munge.key"
start munged "$state/log/munged.out" munged --foreground --force \
    --socket="$state/munge/munge.socket" \
    --key-file="$state/munge/munge.key" \
    --pid-file="$state/run/munged.pid" \
    --seed-file="$state/munge/munged.seed" \
    --log-file="$state/log/munged.log"
wait_for "the munge socket" 20 munged test -S "$state/munge/munge.socket"

# 2. MariaDB on 127.0.0.1 only, with a database and a user for slurmdbd.
mariadb-install-db --no-defaults --user=root --datadir="$state/mysql" \
    --auth-root-authentication-method=normal --skip-test-db \
    >"$state/log/mariadb-install-db.log" 2>&1 \
    || die "mariadb-install-db failed; see $state/log/mariadb-install-db.log"
start mariadbd "$state/log/mariadbd.log" mariadbd --no-defaults --user=root \
    --datadir="$state/mysql" \
    --socket="$state/run/mysqld.sock" \
    --pid-file="$state/run/mysqld.pid" \
    --bind-address=127.0.0.1 --port="$db_port" --skip-name-resolve \
    --skip-log-bin --innodb-buffer-pool-size=128M \
    --log-error="$state/log/mariadbd.err"
wait_for "MariaDB" 60 mariadbd \
    mariadb-admin --no-defaults --socket="$state/run/mysqld.sock" -uroot ping
mariadb --no-defaults --socket="$state/run/mysqld.sock" -uroot <<EOF
CREATE DATABASE $db_name;
CREATE USER '$db_user'@'127.0.0.1' IDENTIFIED BY '$db_pass';
GRANT ALL ON $db_name.* TO '$db_user'@'127.0.0.1';
FLUSH PRIVILEGES;
EOF

# 3. slurmdbd, then the cluster in the accounting database (slurmctld registers with it).
# slurmdbd reads slurmdbd.conf from the folder of $SLURM_CONF.
start slurmdbd "$state/log/slurmdbd.out" slurmdbd -D
wait_for "slurmdbd" 60 slurmdbd timeout 5 sacctmgr -n list cluster
sacctmgr -i add cluster "$cluster" >/dev/null

# 4. slurmctld and slurmd; the node is called localhost whatever the machine's name.
start slurmctld "$state/log/slurmctld.out" slurmctld -D -f "$SLURM_CONF"
wait_for "slurmctld" 60 slurmctld scontrol ping
start slurmd "$state/log/slurmd.out" slurmd -D -N localhost -f "$SLURM_CONF"
node_idle() { [ "$(sinfo -h -n localhost -o %T 2>/dev/null)" = idle ]; }
wait_for "node localhost to be idle" 60 slurmd node_idle

# 5. an account for the calling user, so jobs can be charged to it.
user="$(id -un)"
sacctmgr -i add account "$account" Description="lamellume integration check" \
    Organization=lamellume >/dev/null
sacctmgr -i add user "$user" Account="$account" DefaultAccount="$account" >/dev/null

log "cluster up: SLURM_CONF=$SLURM_CONF partition=$partition account=$account" \
    "cpus=$cpus memory=${real_memory}MB"
