#!/usr/bin/env bash
# Integration check: run the demo screen through a real (single-node) SLURM cluster
# with workflow/profiles/slurm, run it again locally with workflow/profiles/local, and
# require identical result tables.
#
#   tests/integration/slurm/run_slurm_check.sh
#
# Steps: (1) install the Debian packages slurmctld slurmd slurm-client munge slurmdbd
# mariadb-server if missing, and the executor plugin into the venv from
# envs/requirements-slurm.txt; (2) start munged, MariaDB, slurmdbd, slurmctld and slurmd
# on 127.0.0.1 with configs in a temporary folder (start_cluster.sh); (3) run the demo
# through SLURM in a fresh working directory; (4) run it locally in another one;
# (5) compare the result tables. Every daemon is stopped by its recorded pid on exit,
# whether the check passed or not. Exits non-zero on any failure.
#
# Runs as root on Debian 12 (SLURM 22.05); works from any checkout: paths are taken
# relative to this script. Environment:
#   LAMELLUME_VENV            virtual environment to use (default: <checkout>/.venv)
#   LAMELLUME_SLURM_TIMEOUT   seconds allowed for each snakemake run (default: 600)
#   LAMELLUME_SLURM_SHARDS    shards of the demo run (default: 2; one SLURM job each)
#   LAMELLUME_SLURM_TARGETS   space-separated targets (default: the tables, shortlist
#                              and manifest)
#   LAMELLUME_SLURM_KEEP=1    keep the temporary folder (it is kept on failure anyway)
#   LAMELLUME_SLURM_PORT_BASE first of four local TCP ports (default: 16810)
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
repo="$(cd "$here/../../.." && pwd)"
venv="${LAMELLUME_VENV:-$repo/.venv}"
limit="${LAMELLUME_SLURM_TIMEOUT:-600}"
shards="${LAMELLUME_SLURM_SHARDS:-2}"
partition="debug"
account="lamellume"
packages=(slurmctld slurmd slurm-client munge slurmdbd mariadb-server)
tables=(
    results/tables/screen_long.parquet
    results/tables/screen_wide.parquet
    results/tables/entries.parquet
    results/tables/rejects.parquet
)
read -r -a targets <<<"${LAMELLUME_SLURM_TARGETS:-${tables[*]} results/shortlist.csv results/manifest.json}"

log() { printf '[slurm-check %(%H:%M:%S)T] %s\n' -1 "$*"; }
die() { log "ERROR: $*"; exit 1; }

[ "$(id -u)" -eq 0 ] || die "must run as root (it installs packages and starts daemons)"
[ -x "$venv/bin/python" ] || die "no virtual environment at $venv (set LAMELLUME_VENV)"
# Snakemake submits jobs that run `$venv/bin/python -m snakemake ...`; SLURM passes the
# submitting environment on, so the venv's tools are found inside the jobs as well.
export PATH="$venv/bin:$PATH"

work="$(mktemp -d /tmp/lamellume-slurm.XXXXXX)"
made_policy=""
started=$SECONDS
declare -A took

on_exit() {
    local rc=$?
    set +e
    trap - EXIT INT TERM
    if [ "$rc" -ne 0 ] && [ -d "$work/cluster/log" ]; then
        log "failed (exit $rc); last lines of the daemon and SLURM job logs:"
        find "$work/cluster/log" "$work/slurm-run/.snakemake/slurm_logs" \
            "$work/slurm-run/results/logs" -name '*.log' -type f 2>/dev/null \
            | while read -r f; do echo "--- $f"; tail -n 15 "$f"; done
    fi
    "$here/stop_cluster.sh" "$work/cluster"
    [ -n "$made_policy" ] && rm -f /usr/sbin/policy-rc.d
    if [ "$rc" -eq 0 ] && [ "${LAMELLUME_SLURM_KEEP:-0}" != 1 ]; then
        rm -rf "$work"
    else
        log "kept $work"
    fi
    exit "$rc"
}
trap on_exit EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

phase() { took[$1]=$((SECONDS - phase_start)); phase_start=$SECONDS; }
phase_start=$SECONDS

# 1. packages ---------------------------------------------------------------------
missing=()
for p in "${packages[@]}"; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "ok installed" || missing+=("$p")
done
if [ "${#missing[@]}" -gt 0 ]; then
    log "installing ${missing[*]}"
    # Keep the packages' init scripts from starting system-wide daemons: this check
    # starts its own, on its own ports, and stops them again.
    if [ ! -e /usr/sbin/policy-rc.d ]; then
        printf '#!/bin/sh\nexit 101\n' >/usr/sbin/policy-rc.d
        chmod +x /usr/sbin/policy-rc.d
        made_policy=1
    fi
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends \
        -o DPkg::Lock::Timeout=300 "${missing[@]}" >/dev/null
    if [ -n "$made_policy" ]; then rm -f /usr/sbin/policy-rc.d; made_policy=""; fi
fi
log "SLURM $(dpkg-query -W -f='${Version}' slurmctld)"
"$venv/bin/python" -m pip install -q --disable-pip-version-check \
    -r "$repo/envs/requirements-slurm.txt" -c "$repo/envs/constraints.txt"
log "executor plugin $("$venv/bin/python" -m pip show snakemake-executor-plugin-slurm \
    | awk '/^Version:/ {print $2}')"
phase install

# 2. cluster ----------------------------------------------------------------------
LAMELLUME_SLURM_PARTITION="$partition" LAMELLUME_SLURM_ACCOUNT="$account" \
    "$here/start_cluster.sh" "$work/cluster"
# shellcheck disable=SC1091
source "$work/cluster/env.sh"
phase cluster

# 3. the demo through SLURM ---------------------------------------------------------
# Both runs read the repository's config plus this overlay: an absolute campaign path
# (the runs work in other folders) and few shards (each SLURM job costs ~10 s to start).
cat >"$work/demo.yaml" <<EOF
campaign: $repo/inputs/demo
sharding:
  shards: $shards
EOF
"$venv/bin/python" "$here/make_profile.py" "$repo/workflow/profiles/slurm" \
    "$work/profile-slurm" "$partition" "$account" 10
common=(--snakefile "$repo/Snakefile"
        --configfile "$repo/config/config.yaml" "$work/demo.yaml")

# screen NAME PROFILE: run the demo in $work/NAME with the profile, within the limit.
screen() {
    local name="$1" profile="$2" rc=0
    mkdir -p "$work/$name"
    timeout -k 30 "$limit" "$venv/bin/python" -m snakemake "${common[@]}" \
        --directory "$work/$name" --profile "$profile" -- "${targets[@]}" \
        >"$work/$name.log" 2>&1 || rc=$?
    if [ "$rc" -ne 0 ]; then
        tail -n 40 "$work/$name.log"
        if [ "$rc" -eq 124 ] || [ "$rc" -eq 137 ]; then
            die "$name: snakemake did not finish within ${limit}s"
        fi
        die "$name: snakemake failed (exit $rc); log: $work/$name.log"
    fi
}

log "demo through SLURM in $work/slurm-run (limit ${limit}s)"
screen slurm-run "$work/profile-slurm"
# The cluster is new: every job it knows was submitted by this run. Expect the table
# job plus one job per shard (the profile groups each shard's rules into one job).
cluster_jobs() { sacct -n -X -a -S 2000-01-01 -o "$1"; }
submitted="$(cluster_jobs JobID | wc -l)"
log "SLURM run done: $submitted jobs, states: $(cluster_jobs State | sort | uniq -c | xargs)"
[ "$submitted" -ge $((shards + 1)) ] \
    || die "expected at least $((shards + 1)) SLURM jobs, found $submitted"
if cluster_jobs State | grep -qv COMPLETED; then
    die "not every SLURM job completed"
fi
phase slurm

# 4. the same demo locally ----------------------------------------------------------
log "demo locally in $work/local-run"
screen local-run "$repo/workflow/profiles/local"
phase local

# 5. identical tables ---------------------------------------------------------------
"$venv/bin/python" "$here/compare_tables.py" "$work/slurm-run" "$work/local-run" "${tables[@]}"
phase compare

log "PASSED in $((SECONDS - started)) s (install ${took[install]} s, cluster start" \
    "${took[cluster]} s, SLURM run ${took[slurm]} s, local run ${took[local]} s," \
    "compare ${took[compare]} s; the stop follows)"
