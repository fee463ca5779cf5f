#!/usr/bin/env bash
# Start a single-node SLURM on this machine (slurmctld + slurmd + munged from the
# distribution's packages, configured for this host only), for stopwise's SLURM tests.
#
#   sudo scripts/start-slurm.sh      # as root; Debian/Ubuntu (apt-get)
#
# Idempotent: when the node already answers `sinfo` as usable on the configuration this script
# writes, it prints one line and exits 0 within a second. Otherwise it installs what is
# missing (slurm-wlm, munge), creates a munge key if there is none, writes
# /etc/slurm/slurm.conf for this host, (re)starts the daemons
# directly (containers have no systemd) and waits, bounded, for the node to be idle.
# Prints one line: "start-slurm: SLURM is up ..." (exit 0) or "start-slurm: SLURM not
# started: <why>" (exit 1). Daemon logs: /var/log/slurm/, /var/log/munge/.
set -uo pipefail

ME=start-slurm
CONF_DIR=/etc/slurm
CONF=$CONF_DIR/slurm.conf
LOG_DIR=/var/log/slurm
WAIT_S=${STOPWISE_SLURM_WAIT_S:-90}

fail() { echo "$ME: SLURM not started: $*" >&2; exit 1; }

HOST=$(hostname -s 2>/dev/null) || fail "hostname -s failed"
[ -n "$HOST" ] || fail "hostname -s printed nothing"

node_state() {  # the node's state as sinfo prints it (idle, mixed, down*, ...), or nothing
    command -v sinfo >/dev/null 2>&1 || return 0
    timeout 10 sinfo -h -n "$HOST" -o %T 2>/dev/null | head -n 1
}

usable() { case "$1" in idle|mixed|mix|allocated|alloc|completing|comp) return 0;; esac; return 1; }

render_conf() {  # this host's slurm.conf, on stdout
    local user=root cpus mem
    id slurm >/dev/null 2>&1 && user=slurm
    cpus=$(nproc) || return 1
    mem=$(awk '/^MemTotal:/ {print int($2 / 1024)}' /proc/meminfo)
    [ -n "$mem" ] && [ "$mem" -gt 0 ] || return 1
    cat <<EOF
# Written by stopwise's scripts/start-slurm.sh: a single-node SLURM for this host only.
ClusterName=stopwise-local
SlurmctldHost=$HOST(127.0.0.1)
SlurmUser=$user
AuthType=auth/munge
# A requeued job waits this long before it starts again (default 120 s).
AuthInfo=cred_expire=30
CredType=cred/munge
MpiDefault=none
MailProg=/bin/true
SwitchType=switch/none
# A container: no cgroups, no systemd.
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU_Memory
DefMemPerCPU=1024
SlurmdParameters=config_overrides
ReturnToService=2
KillWait=5
MinJobAge=60
InactiveLimit=0
SlurmctldTimeout=30
SlurmdTimeout=30
StateSaveLocation=/var/spool/slurmctld
SlurmdSpoolDir=/var/spool/slurmd
SlurmctldPidFile=/run/slurmctld.pid
SlurmdPidFile=/run/slurmd.pid
SlurmctldLogFile=$LOG_DIR/slurmctld.log
SlurmdLogFile=$LOG_DIR/slurmd.log
NodeName=$HOST NodeAddr=127.0.0.1 CPUs=$cpus RealMemory=$mem State=UNKNOWN
PartitionName=local Nodes=$HOST Default=YES MaxTime=INFINITE State=UP
EOF
}

state=$(node_state)
if usable "$state" && [ "$(render_conf 2>/dev/null)" = "$(cat "$CONF" 2>/dev/null)" ]; then
    echo "$ME: SLURM is up (already running): node $HOST $state, partition $(timeout 10 sinfo -h -o %P | head -n 1)"
    exit 0
fi

[ "$(id -u)" = 0 ] || fail "must run as root (it installs packages and starts daemons)"

# --- packages -------------------------------------------------------------------------------
missing() { for b in slurmctld slurmd sinfo sbatch munged; do command -v "$b" >/dev/null 2>&1 || return 0; done; return 1; }
if missing; then
    command -v apt-get >/dev/null 2>&1 || fail "slurm/munge are not installed and there is no apt-get to install them"
    export DEBIAN_FRONTEND=noninteractive
    pkgs=(slurm-wlm munge)
    if ! apt-get install -y -qq --no-install-recommends "${pkgs[@]}" >/tmp/start-slurm-apt.log 2>&1; then
        apt-get update -qq >>/tmp/start-slurm-apt.log 2>&1 || fail "apt-get update failed (see /tmp/start-slurm-apt.log)"
        apt-get install -y -qq --no-install-recommends "${pkgs[@]}" >>/tmp/start-slurm-apt.log 2>&1 \
            || fail "apt-get install ${pkgs[*]} failed (see /tmp/start-slurm-apt.log)"
    fi
    missing && fail "packages installed but slurmctld/slurmd/sinfo/sbatch/munged are still missing"
fi

# --- munge ----------------------------------------------------------------------------------
id munge >/dev/null 2>&1 || fail "the munge package did not create the 'munge' user"
mkdir -p /etc/munge /var/lib/munge /var/log/munge /run/munge
if [ ! -s /etc/munge/munge.key ]; then
    if command -v mungekey >/dev/null 2>&1; then
        mungekey --create --keyfile=/etc/munge/munge.key >/dev/null 2>&1 || fail "mungekey --create failed"
    else
        dd if=/dev/urandom of=/etc/munge/munge.key bs=1024 count=1 status=none || fail "cannot write /etc/munge/munge.key"
    fi
fi
chown munge:munge /etc/munge /etc/munge/munge.key /var/lib/munge /var/log/munge /run/munge
chmod 0700 /etc/munge /var/lib/munge /var/log/munge
chmod 0400 /etc/munge/munge.key
chmod 0755 /run/munge
munge_ok() { munge -n 2>/dev/null | unmunge >/dev/null 2>&1; }
if ! munge_ok; then
    rm -f /run/munge/munge.socket.2 /run/munge/munge.socket.2.lock 2>/dev/null
    runuser -u munge -- /usr/sbin/munged >/dev/null 2>&1 || fail "munged did not start (see /var/log/munge/munged.log)"
    for _ in $(seq 1 20); do munge_ok && break; sleep 0.5; done
    munge_ok || fail "munged runs but munge -n | unmunge fails (see /var/log/munge/munged.log)"
fi

# --- slurm.conf -----------------------------------------------------------------------------
mkdir -p "$CONF_DIR" "$LOG_DIR" /var/spool/slurmctld /var/spool/slurmd
id slurm >/dev/null 2>&1 && chown slurm /var/spool/slurmctld "$LOG_DIR"
render_conf >"$CONF.new" || fail "cannot read this host's CPUs (nproc) or memory (/proc/meminfo)"
changed=0
if ! cmp -s "$CONF.new" "$CONF"; then mv "$CONF.new" "$CONF"; changed=1; else rm -f "$CONF.new"; fi
chmod 0644 "$CONF"

# --- daemons --------------------------------------------------------------------------------
alive() {  # the daemon whose pid file is $1 is running
    local pid
    pid=$(cat "$1" 2>/dev/null) || return 1
    [ -n "$pid" ] && kill -0 "$pid" 2>/dev/null
}
if [ "$changed" = 1 ] && { alive /run/slurmctld.pid || alive /run/slurmd.pid; }; then
    # running on another configuration: stop them (SLURM's own command), start them again
    scontrol shutdown >/dev/null 2>&1
    for _ in $(seq 1 30); do alive /run/slurmctld.pid || alive /run/slurmd.pid || break; sleep 1; done
    { alive /run/slurmctld.pid || alive /run/slurmd.pid; } && fail "the running daemons did not stop for the new configuration"
fi
if ! alive /run/slurmctld.pid; then
    slurmctld >>"$LOG_DIR/start.log" 2>&1 || fail "slurmctld did not start (see $LOG_DIR/slurmctld.log)"
fi
if ! alive /run/slurmd.pid; then
    slurmd >>"$LOG_DIR/start.log" 2>&1 || fail "slurmd did not start (see $LOG_DIR/slurmd.log)"
fi

deadline=$((SECONDS + WAIT_S))
resumed=0
while :; do
    state=$(node_state)
    usable "$state" && break
    case "$state" in
        down*|drain*|drng*|drained*|fail*)
            if [ "$resumed" = 0 ]; then
                scontrol update NodeName="$HOST" State=RESUME >/dev/null 2>&1
                resumed=1
            fi;;
    esac
    alive /run/slurmctld.pid || fail "slurmctld exited (see $LOG_DIR/slurmctld.log)"
    alive /run/slurmd.pid || fail "slurmd exited (see $LOG_DIR/slurmd.log)"
    [ "$SECONDS" -ge "$deadline" ] && fail "node $HOST is '${state:-not listed}' after ${WAIT_S}s (see $LOG_DIR/)"
    sleep 1
done
echo "$ME: SLURM is up: node $HOST $state ($(nproc) CPUs), partition local, controller 127.0.0.1"
