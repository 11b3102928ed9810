#!/bin/bash
# Start a one-node Slurm cluster on 127.0.0.1 whose every file lives in DIR (munge key and
# socket, slurm.conf, state, logs, PID files). Used by tests/batch_slurm.rs; run as root.
# Usage: up.sh DIR   (DIR must not exist yet). Ports from SLURMCTLD_PORT and SLURMD_PORT.
# Stop it with down.sh DIR.
set -euo pipefail
W=${1:?dir}; H=$(hostname -s)
NCPU=$(nproc); MEM=$(( $(free -m | awk '/^Mem:/{print $2}') * 9 / 10 ))
mkdir -p "$W"/{munge,munge-run,state,spool,log}
chmod 755 "$W"
chown munge:munge "$W/munge" "$W/munge-run"; chmod 700 "$W/munge"; chmod 755 "$W/munge-run"
mungekey -c -k "$W/munge/munge.key"
chown munge:munge "$W/munge/munge.key"; chmod 400 "$W/munge/munge.key"
runuser -u munge -- munged -S "$W/munge-run/munge.socket.2" \
  --key-file="$W/munge/munge.key" --log-file="$W/munge/munged.log" \
  --pid-file="$W/munge-run/munged.pid" --seed-file="$W/munge/munged.seed"
cat > "$W/slurm.conf" <<CONF
ClusterName=voxstrata-test
SlurmctldHost=$H(127.0.0.1)
SlurmctldPort=${SLURMCTLD_PORT:-6817}
SlurmdPort=${SLURMD_PORT:-6818}
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$W/munge-run/munge.socket.2
StateSaveLocation=$W/state
SlurmdSpoolDir=$W/spool
SlurmctldPidFile=$W/slurmctld.pid
SlurmdPidFile=$W/slurmd.pid
SlurmctldLogFile=$W/log/slurmctld.log
SlurmdLogFile=$W/log/slurmd.log
MailProg=/bin/true
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
SwitchType=switch/none
MpiDefault=none
CommunicationParameters=NoInAddrAny
ReturnToService=2
SchedulerType=sched/backfill
SchedulerParameters=batch_sched_delay=0
DependencyParameters=kill_invalid_depend
NodeName=$H NodeAddr=127.0.0.1 CPUs=$NCPU RealMemory=$MEM State=UNKNOWN
PartitionName=debug Nodes=$H Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF="$W/slurm.conf"
slurmctld -f "$SLURM_CONF" -c
slurmd -f "$SLURM_CONF"
for _ in $(seq 1 60); do
  [ "$(sinfo -h -o %t 2>/dev/null)" = idle ] && { echo "slurm up: SLURM_CONF=$SLURM_CONF"; exit 0; }
  sleep 0.5
done
echo "slurm did not become idle" >&2; sinfo >&2 || true; tail -n 20 "$W"/log/*.log >&2; exit 1
