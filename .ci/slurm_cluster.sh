#!/usr/bin/env bash
# A real one-node SLURM cluster on this machine, for the test of sweeps launched with launcher=slurm
# (tests/launchers/test_slurm_launcher.py).
#
#   bash .ci/slurm_cluster.sh start STATE_DIR   install Debian's packages if missing, write a
#                                               slurm.conf bound to loopback, start munged,
#                                               slurmctld and slurmd, wait until the node takes jobs
#   bash .ci/slurm_cluster.sh stop STATE_DIR    stop every daemon that `start` started, by its pid
#
# `start` writes STATE_DIR/env: the variables a client needs (SLURM_CONF, and KILN_SLURM_CLUSTER,
# which tells the test that a cluster is up and which partition to use). Source it before pytest.
# Everything the cluster writes stays under STATE_DIR except munge's socket, which Slurm's munge
# plug-in looks for at its fixed default place (/run/munge).
set -euo pipefail

action=${1:?usage: slurm_cluster.sh start|stop STATE_DIR}
state=${2:?usage: slurm_cluster.sh start|stop STATE_DIR}
partition=kiln

stop_cluster() {
    # Stop only what `start` recorded, newest first, so slurmd does not outlive its controller.
    local name pid
    for name in slurmd slurmctld munged; do
        [[ -f "$state/$name.pid" ]] || continue
        pid=$(cat "$state/$name.pid")
        if kill -0 "$pid" 2>/dev/null; then
            kill -TERM "$pid" 2>/dev/null || true
            for _ in $(seq 50); do kill -0 "$pid" 2>/dev/null || break; sleep 0.1; done
            kill -0 "$pid" 2>/dev/null && kill -KILL "$pid" 2>/dev/null || true
        fi
        rm -f "$state/$name.pid"
    done
}

if [[ $action == stop ]]; then
    stop_cluster
    exit 0
fi
[[ $action == start ]] || { echo "slurm_cluster.sh: unknown action $action (start|stop)" >&2; exit 2; }

# A fresh CI machine has none of the packages; a developer's machine may have them already.
if ! command -v slurmctld >/dev/null || ! command -v slurmd >/dev/null || ! command -v sbatch >/dev/null \
    || ! command -v munged >/dev/null; then
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends \
        slurmctld slurmd slurm-client munge >/dev/null
fi

mkdir -p "$state"/ctld "$state"/spool
state=$(cd "$state" && pwd)
# If start fails half-way, leave nothing running.
trap 'stop_cluster' ERR

# munge: the key comes with Debian's package; make one if a minimal install left none.
if [[ ! -s /etc/munge/munge.key ]]; then
    mungekey --create --keyfile=/etc/munge/munge.key
    chown munge:munge /etc/munge/munge.key && chmod 0400 /etc/munge/munge.key
fi
# munged refuses a socket directory that others cannot read into, and clients (slurmctld, slurmd,
# the job steps) fail to authenticate unless it is mode 755.
mkdir -p /run/munge /var/log/munge /var/lib/munge
chown munge:munge /run/munge /var/log/munge /var/lib/munge
chmod 0755 /run/munge
# setpriv execs munged itself, so $! is munged's pid (runuser or su would leave a parent in between).
setpriv --reuid=munge --regid=munge --init-groups \
    munged --foreground --log-file="$state/munged.log" --pid-file="$state/munged.pidfile" \
    >>"$state/munged.log" 2>&1 &
echo $! >"$state/munged.pid"
for _ in $(seq 50); do [[ -S /run/munge/munge.socket.2 ]] && break; sleep 0.1; done
munge -n | unmunge >/dev/null || { echo "slurm_cluster.sh: munged does not answer; see $state/munged.log" >&2; exit 1; }

# The node must be declared with the layout slurmd itself detects (sockets, cores, memory): with a
# mismatch slurmd's registration is refused and the node stays down. DefMemPerCPU keeps a job that
# asks for no memory from claiming the whole node, which would run jobs one at a time.
host=$(hostname -s)
layout=$(slurmd -C | head -1 | sed -e 's/^NodeName=[^ ]* //')
cat >"$state/slurm.conf" <<EOF
# Written by .ci/slurm_cluster.sh: one node on loopback, for tests only.
ClusterName=kilnci
SlurmctldHost=$host(127.0.0.1)
SlurmctldPort=6917
SlurmdPort=6918
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
StateSaveLocation=$state/ctld
SlurmdSpoolDir=$state/spool
SlurmctldPidFile=$state/slurmctld.pidfile
SlurmdPidFile=$state/slurmd.pidfile
SlurmctldLogFile=$state/slurmctld.log
SlurmdLogFile=$state/slurmd.log
# No cgroups on a CI machine: track job processes by their parent ids.
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU_Memory
# No accounting daemon: sacct does not work here, which is why Kiln's launcher watches squeue.
AccountingStorageType=accounting_storage/none
JobAcctGatherType=jobacct_gather/none
JobCompType=jobcomp/none
MpiDefault=none
ReturnToService=2
# A requeued job may start again at once (the default holds it for minutes).
MinJobAge=60
NodeName=$host NodeAddr=127.0.0.1 $layout State=UNKNOWN
PartitionName=$partition Nodes=$host Default=YES MaxTime=INFINITE State=UP DefMemPerCPU=1024
EOF
export SLURM_CONF="$state/slurm.conf"

slurmctld -D -i -f "$SLURM_CONF" >>"$state/slurmctld.out" 2>&1 &
echo $! >"$state/slurmctld.pid"
slurmd -D -f "$SLURM_CONF" >>"$state/slurmd.out" 2>&1 &
echo $! >"$state/slurmd.pid"

# Ready when the node is idle: then a submitted job starts within a second.
ready=""
for _ in $(seq 150); do
    if [[ $(sinfo -h -n "$host" -o '%t' 2>/dev/null) == idle ]]; then ready=1; break; fi
    sleep 0.2
done
if [[ -z $ready ]]; then
    echo "slurm_cluster.sh: node $host did not become idle within 30 s; see $state/slurmctld.log and $state/slurmd.log" >&2
    stop_cluster
    exit 1
fi
trap - ERR

cat >"$state/env" <<EOF
export SLURM_CONF=$state/slurm.conf
export KILN_SLURM_CLUSTER=$partition
EOF
echo "slurm_cluster.sh: one-node cluster up (partition $partition, node $host); logs in $state"
