#!/bin/bash
# Start a one-node Slurm cluster by hand (no systemd): munged, slurmctld, slurmd.
# Usage: .ci/slurm/start.sh [STATE_DIR]   (default /tmp/gb-slurm). Must run as root.
# Writes STATE_DIR/env (source it: sets SLURM_CONF) and STATE_DIR/pids.
set -euo pipefail
STATE=${1:-/tmp/gb-slurm}
if ! command -v slurmctld >/dev/null || ! command -v munged >/dev/null; then
    apt-get update -qq
    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends slurm-wlm munge
fi
mkdir -p "$STATE"/{spool,state,log}
: > "$STATE/pids"

# munge: a key, its run dir, and the daemon (forks; we record its pid file).
mkdir -p /run/munge /etc/munge /var/lib/munge /var/log/munge
if [ ! -s /etc/munge/munge.key ]; then
    dd if=/dev/urandom of=/etc/munge/munge.key bs=1024 count=1 status=none
fi
chown -R munge:munge /etc/munge /run/munge /var/lib/munge /var/log/munge
chmod 0700 /etc/munge /var/lib/munge /var/log/munge; chmod 0755 /run/munge
chmod 0400 /etc/munge/munge.key
if [ -s /run/munge/munged.pid ] && kill -0 "$(cat /run/munge/munged.pid)" 2>/dev/null; then
    echo "start.sh: munged already running (pid $(cat /run/munge/munged.pid)); not recording it" >&2
else
    rm -f /run/munge/munged.pid
    runuser -u munge -- munged --force
    for _ in $(seq 50); do [ -s /run/munge/munged.pid ] && break; sleep 0.1; done
    echo "munged $(cat /run/munge/munged.pid)" >> "$STATE/pids"
fi
munge -n | unmunge >/dev/null

CPUS=$(nproc)
# Leave 10 % of memory to the system; RealMemory is in MB.
MEM_MB=$(awk '/^MemTotal:/ {printf "%d", $2 / 1024 * 0.9}' /proc/meminfo)
cat > "$STATE/slurm.conf" <<CONF
ClusterName=glitchlab
SlurmctldHost=localhost(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
MpiDefault=none
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
ReturnToService=2
SchedulerType=sched/backfill
StateSaveLocation=$STATE/state
SlurmdSpoolDir=$STATE/spool
SlurmctldPidFile=$STATE/slurmctld.pid
SlurmdPidFile=$STATE/slurmd.pid
SlurmctldLogFile=$STATE/log/slurmctld.log
SlurmdLogFile=$STATE/log/slurmd.log
SlurmctldPort=6817
SlurmdPort=6818
MaxArraySize=10001
NodeName=localhost NodeAddr=127.0.0.1 CPUs=$CPUS RealMemory=$MEM_MB State=UNKNOWN
PartitionName=gbq Nodes=localhost Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF="$STATE/slurm.conf"
echo "export SLURM_CONF=$SLURM_CONF" > "$STATE/env"

slurmctld -i -f "$SLURM_CONF"
for _ in $(seq 100); do [ -s "$STATE/slurmctld.pid" ] && break; sleep 0.1; done
echo "slurmctld $(cat "$STATE/slurmctld.pid")" >> "$STATE/pids"
slurmd -f "$SLURM_CONF"
for _ in $(seq 100); do [ -s "$STATE/slurmd.pid" ] && break; sleep 0.1; done
echo "slurmd $(cat "$STATE/slurmd.pid")" >> "$STATE/pids"

# Wait until the node is idle.
for _ in $(seq 120); do
    if sinfo -h -N -o '%T' 2>/dev/null | grep -qx idle; then
        sinfo; exit 0
    fi
    sleep 0.5
done
echo "start.sh: node did not become idle; see $STATE/log/" >&2
sinfo -N -l >&2 || true
exit 1
