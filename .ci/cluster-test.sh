#!/usr/bin/env bash
# The demo workflow on a real single-node SLURM cluster, against a local run.
#
# Installs SLURM and munge from the Debian packages if they are missing,
# starts munged, slurmctld and slurmd in the background (no systemd here),
# runs the demo workflow once locally and once through the cluster profile
# (config/profiles/slurm), then checks that every job of the cluster run was
# a SLURM job that slurmctld recorded as COMPLETED and that both runs wrote
# the same tables. Every daemon started here is stopped by its process id on
# exit, also on failure.
#
# Run as root: `make cluster-test` (it installs the `cluster` extra first).
# Environment: BIN (the virtualenv's bin, default .venv/bin), KEEP=1 keeps the
# scratch folder for inspection, CLUSTER_TIMEOUT (seconds, default 1800; the
# run takes 5 to 9 minutes on two cores).
set -euo pipefail
export PATH=/usr/sbin:/usr/bin:/sbin:/bin:$PATH
cd "$(dirname "$0")/.."
ROOT=$(pwd)
BIN=$(cd "${BIN:-.venv/bin}" && pwd)
TIMEOUT=${CLUSTER_TIMEOUT:-1800}
SCRATCH=$(mktemp -d /tmp/liqpanel-cluster.XXXXXX)
STATE=$SCRATCH/slurm
DAEMONS=()
SLURM_CONF=
MARK=

say() { printf '[cluster-test %s] %s\n' "$(date +%H:%M:%S)" "$*"; }

stop_daemons() {
    local status=$?
    # slurmd first, then the controller, then munge: each by the pid we started
    for (( i=${#DAEMONS[@]}-1; i>=0; i-- )); do
        local pid=${DAEMONS[i]}
        if kill -0 "$pid" 2>/dev/null; then
            kill -TERM "$pid" 2>/dev/null || true
            for _ in $(seq 1 50); do kill -0 "$pid" 2>/dev/null || break; sleep 0.2; done
            kill -0 "$pid" 2>/dev/null && kill -KILL "$pid" 2>/dev/null || true
        fi
    done
    if (( status != 0 )); then
        say "FAILED (exit $status); daemon logs:"
        for f in "$STATE"/*.log; do [[ -f $f ]] && { echo "--- $f"; tail -n 30 "$f"; }; done
    fi
    [[ -n ${SLURM_CONF:-} ]] && grep -qF "$MARK" "$SLURM_CONF" 2>/dev/null && rm -f "$SLURM_CONF"
    if [[ ${KEEP:-0} == 1 ]]; then say "scratch kept in $SCRATCH"; else rm -rf "$SCRATCH"; fi
    exit "$status"
}
trap stop_daemons EXIT
trap 'exit 130' INT TERM

if [[ $(id -u) != 0 ]]; then
    say "needs root (it installs and starts SLURM daemons)"; exit 2
fi

# ---------------------------------------------------------------- install
if ! command -v slurmctld >/dev/null || ! command -v slurmd >/dev/null || ! command -v sbatch >/dev/null \
   || ! command -v munged >/dev/null; then
    say "installing slurmctld, slurmd, slurm-client and munge from the Debian packages"
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends \
        slurmctld slurmd slurm-client munge >/dev/null
fi

# ---------------------------------------------------------------- configure
mkdir -p "$STATE/ctld" "$STATE/spool" /run/munge /var/log/munge /var/lib/munge
chown munge:munge /run/munge /var/log/munge /var/lib/munge
chmod 0755 /run/munge
if [[ ! -s /etc/munge/munge.key ]]; then
    mungekey --create --keyfile=/etc/munge/munge.key
fi
chown munge:munge /etc/munge/munge.key && chmod 0400 /etc/munge/munge.key

HOST=$(hostname -s)
CPUS=$(nproc)
MEM_MB=$(awk '/MemTotal/ {print int($2 / 1024)}' /proc/meminfo)
NODE_MB=$(( MEM_MB * 95 / 100 ))   # a little less than the machine has
# The default path: the executor's job step runs srun with the SLURM_*
# variables cleared, so SLURM_CONF would not reach it.
SLURM_CONF=/etc/slurm/slurm.conf
MARK="# written by liqpanel's cluster test"
if [[ -e $SLURM_CONF ]] && ! grep -qF "$MARK" "$SLURM_CONF"; then
    say "$SLURM_CONF exists and is not ours: not touching a real cluster's configuration"; exit 2
fi
mkdir -p /etc/slurm
cat > "$SLURM_CONF" <<EOF
$MARK
ClusterName=liqpanel
SlurmctldHost=$HOST(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
StateSaveLocation=$STATE/ctld
SlurmdSpoolDir=$STATE/spool
SlurmctldPidFile=$STATE/slurmctld.pid
SlurmdPidFile=$STATE/slurmd.pid
SlurmctldLogFile=$STATE/slurmctld.log
SlurmdLogFile=$STATE/slurmd.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU_Memory
SchedulerType=sched/backfill
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
# finished jobs stay visible to squeue/scontrol for an hour: the executor's
# status queries use squeue (no accounting database here), and the check
# below asks slurmctld for every job of the run
MinJobAge=3600
ReturnToService=2
SlurmdTimeout=60
NodeName=$HOST NodeAddr=127.0.0.1 CPUs=$CPUS RealMemory=$NODE_MB State=UNKNOWN
PartitionName=main Nodes=ALL Default=YES MaxTime=INFINITE State=UP
EOF

# ---------------------------------------------------------------- start
say "starting munged, slurmctld and slurmd ($CPUS CPUs, $NODE_MB MB)"
setpriv --reuid=munge --regid=munge --init-groups /usr/sbin/munged --foreground \
    >"$STATE/munged.log" 2>&1 &
DAEMONS+=($!)
for _ in $(seq 1 50); do [[ -S /run/munge/munge.socket.2 ]] && break; sleep 0.2; done
munge -n | unmunge >/dev/null || { say "munge does not work"; exit 1; }
slurmctld -D -f "$SLURM_CONF" >>"$STATE/slurmctld.out" 2>&1 &
DAEMONS+=($!)
slurmd -D -f "$SLURM_CONF" >>"$STATE/slurmd.out" 2>&1 &
DAEMONS+=($!)
for _ in $(seq 1 120); do
    state=$(sinfo --noheader --nodes="$HOST" --format=%T 2>/dev/null || true)
    [[ $state == idle ]] && break
    sleep 1
done
[[ $state == idle ]] || { say "node $HOST is '$state', not idle"; sinfo || true; exit 1; }
say "cluster up: $(sinfo --noheader --format='%P %D %T %c CPUs %m MB')"

# ---------------------------------------------------------------- run twice
prepare() {  # a working folder that sees the demo inputs under the same relative paths
    mkdir -p "$1"
    ln -s "$ROOT/demo_data" "$1/demo_data"
    ln -s "$ROOT/config" "$1/config"
}
SNAKEMAKE=("$BIN/python" -m snakemake --snakefile "$ROOT/Snakefile" --configfile config/config.yaml)
prepare "$SCRATCH/local"
prepare "$SCRATCH/cluster"

say "local run"
(cd "$SCRATCH/local" && "${SNAKEMAKE[@]}" --cores "$CPUS" --force-use-threads -- all) >"$SCRATCH/local.out" 2>&1 \
    || { tail -n 60 "$SCRATCH/local.out"; say "the local run failed"; exit 1; }

# Polling every 2 s keeps this short test short; the profile's 20 s spares a
# real cluster's controller. MinJobAge above is far more than 3 x 2 s.
say "cluster run (at most ${TIMEOUT}s)"
start=$(date +%s)
(cd "$SCRATCH/cluster" && timeout -s INT -k 60 "$TIMEOUT" "${SNAKEMAKE[@]}" \
    --profile "$ROOT/config/profiles/slurm" --slurm-keep-successful-logs \
    --slurm-init-seconds-before-status-checks 2 -- all) >"$SCRATCH/cluster.out" 2>&1 \
    || { tail -n 60 "$SCRATCH/cluster.out"; say "the cluster run failed"; exit 1; }
say "cluster run took $(( $(date +%s) - start ))s"

# ---------------------------------------------------------------- check
"$BIN/python" "$ROOT/.ci/check_cluster_run.py" "$SCRATCH/local" "$SCRATCH/cluster"
say "passed"
