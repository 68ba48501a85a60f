#!/usr/bin/env bash
# The workflow on a real SLURM scheduler: a one-node cluster on loopback, started and stopped here.
#
# 1. installs Debian's munge, slurmctld, slurmd and slurm-client if they are missing;
# 2. writes a munge key and slurm.conf in a temporary folder (and the same slurm.conf as
#    /etc/slurm/slurm.conf, where SLURM looks by default: the executor's job-step plugin strips the
#    SLURM_* variables, SLURM_CONF included, from a job's environment before it calls srun);
# 3. starts munged, slurmctld and slurmd as root (node "localhost" at 127.0.0.1, CPU layout from
#    `slurmd -C`, no cgroups, no accounting) and waits until sinfo shows the node idle;
# 4. installs the executor plugin into .venv (the `cluster` extra);
# 5. generates the small invented scenario, runs it once locally (profiles/workstation) and once
#    through SLURM (profiles/slurm), each into its own results folder;
# 6. compares limits.ecsv and budget.ecsv byte for byte (they must be identical), and report.html and
#    budget.json too (identical, or different only by the results folder's path written into them);
# 7. stops every daemon it started, by pidfile, on exit (also on failure), and puts back an
#    /etc/slurm/slurm.conf that was there before.
# Every wait is bounded. Exit status 0 only if everything above passed.
set -euo pipefail

REPO=$(cd "$(dirname "$0")/.." && pwd)
cd "$REPO"
T0=$(date +%s)
MARK="# Written by gasledger .ci/slurm_test.sh for its one-node test cluster."
PARTITION=main            # the partition that profiles/slurm asks for by default
NODE_TIMEOUT=120          # seconds for the node to come up idle
RUN_TIMEOUT=1500          # seconds for one workflow run

say() { echo "slurm_test: $*"; }
die() { echo "slurm_test: FAILED: $*" >&2; exit 1; }
elapsed() { echo $(( $(date +%s) - T0 )); }

# One test cluster at a time on this machine (it uses SLURM's default ports and /etc/slurm/slurm.conf).
exec 9>/run/lock/gasledger-slurm-test.lock
flock -w 900 9 || die "another .ci/slurm_test.sh still holds /run/lock/gasledger-slurm-test.lock after 900 s"
(( $(elapsed) < 2 )) || say "waited $(elapsed) s for another .ci/slurm_test.sh to finish"
T0=$(date +%s)
for port in 6817 6818; do
    if (exec 3<>"/dev/tcp/127.0.0.1/$port") 2>/dev/null; then
        die "something already listens on 127.0.0.1:$port (SLURM's default port): is another slurmctld/slurmd running?"
    fi
done

TMP=$(mktemp -d "${TMPDIR:-/tmp}/gasledger-slurm.XXXXXX")
chmod 0755 "$TMP"
mkdir -p "$TMP/run" "$TMP/log" "$TMP/munge" "$TMP/spool/ctld" "$TMP/spool/d"
chmod 0700 "$TMP/munge"
export SLURM_CONF="$TMP/slurm.conf"
ETC_CONF=/etc/slurm/slurm.conf
ETC_BACKUP="$TMP/etc-slurm.conf.before"
SLURM_UP=""

# Stop the process named in pidfile $1 if it is still the program $2 (a reused pid is left alone).
stop_by_pidfile() {
    local file=$1 name=$2 pid i
    [[ -s $file ]] || return 0
    pid=$(<"$file")
    [[ $pid =~ ^[0-9]+$ ]] || return 0
    [[ -r /proc/$pid/comm && $(</proc/"$pid"/comm) == "$name" ]] || return 0
    kill -TERM "$pid" 2>/dev/null || return 0
    for i in $(seq 50); do
        kill -0 "$pid" 2>/dev/null || return 0
        sleep 0.2
    done
    say "$name (pid $pid) ignored SIGTERM for 10 s; sending SIGKILL"
    kill -KILL "$pid" 2>/dev/null || true
}

cleanup() {
    local rc=$?
    set +e
    trap - EXIT INT TERM
    if [[ -n $SLURM_UP ]]; then
        timeout 15 scancel --user="$(id -un)" >/dev/null 2>&1
    fi
    stop_by_pidfile "$TMP/run/slurmd.pid" slurmd
    stop_by_pidfile "$TMP/run/slurmctld.pid" slurmctld
    stop_by_pidfile "$TMP/run/munged.pid" munged
    if [[ -f $ETC_BACKUP ]]; then
        cp -p "$ETC_BACKUP" "$ETC_CONF"
    elif [[ -f $ETC_CONF ]] && head -n 1 "$ETC_CONF" | grep -qxF "$MARK"; then
        rm -f "$ETC_CONF"
    fi
    if (( rc != 0 )); then
        echo "slurm_test: exit status $rc after $(elapsed) s; daemon logs follow" >&2
        for f in "$TMP"/log/*.log; do
            [[ -f $f ]] || continue
            echo "----- $f (last 30 lines)" >&2
            tail -n 30 "$f" >&2
        done
        echo "slurm_test: temporary folder kept for inspection: $TMP" >&2
    else
        rm -rf "$TMP"
    fi
    exit "$rc"
}
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

# ---------------------------------------------------------------- 1. packages
missing=()
for prog in munged slurmctld slurmd sinfo; do
    command -v "$prog" >/dev/null 2>&1 || missing+=("$prog")
done
if (( ${#missing[@]} )); then
    say "installing Debian's munge, slurmctld, slurmd, slurm-client (missing: ${missing[*]}) ..."
    timeout 300 apt-get update -qq
    DEBIAN_FRONTEND=noninteractive timeout 600 apt-get install -y -qq --no-install-recommends \
        munge slurmctld slurmd slurm-client >"$TMP/log/apt.txt" 2>&1 \
        || { tail -n 20 "$TMP/log/apt.txt" >&2; die "apt-get install failed"; }
fi
[[ -x .venv/bin/python ]] || timeout 900 make install

# ---------------------------------------------------------------- 2. munge key and slurm.conf
( umask 077; head -c 1024 /dev/urandom >"$TMP/munge/munge.key" )
MUNGE_SOCKET="$TMP/munge/munge.socket"

# The node's CPU layout as slurmd itself detects it; memory below what is free now.
hw=$(slurmd -C | head -n 1)
layout=$(tr ' ' '\n' <<<"$hw" | grep -E '^(CPUs|Boards|SocketsPerBoard|CoresPerSocket|ThreadsPerCore)=' | tr '\n' ' ')
[[ $layout == *CPUs=* ]] || die "could not read the CPU layout from 'slurmd -C': $hw"
avail_mb=$(( $(awk '/^MemAvailable:/ {print $2}' /proc/meminfo) / 1024 ))
real_mb=$(( avail_mb * 3 / 4 ))
(( real_mb >= 3000 )) || die "only $avail_mb MB of memory available; the workflow's jobs ask for up to 2000 MB"

cat >"$SLURM_CONF" <<EOF
$MARK
ClusterName=gasledgerci
SlurmctldHost=localhost(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$MUNGE_SOCKET
StateSaveLocation=$TMP/spool/ctld
SlurmdSpoolDir=$TMP/spool/d
SlurmctldPidFile=$TMP/run/slurmctld.pid
SlurmdPidFile=$TMP/run/slurmd.pid
SlurmctldLogFile=$TMP/log/slurmctld.log
SlurmdLogFile=$TMP/log/slurmd.log
SlurmctldDebug=info
SlurmdDebug=info
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
MpiDefault=none
SwitchType=switch/none
SchedulerType=sched/backfill
SelectType=select/cons_tres
SelectTypeParameters=CR_Core_Memory
ReturnToService=2
# squeue (the workflow's status check) sees a finished job for this many seconds.
MinJobAge=3600
SlurmctldTimeout=60
SlurmdTimeout=60
NodeName=localhost NodeAddr=127.0.0.1 ${layout}RealMemory=$real_mb State=UNKNOWN
PartitionName=$PARTITION Nodes=localhost Default=YES MaxTime=INFINITE State=UP
EOF
mkdir -p "$(dirname "$ETC_CONF")"
if [[ -f $ETC_CONF ]] && ! head -n 1 "$ETC_CONF" | grep -qxF "$MARK"; then
    cp -p "$ETC_CONF" "$ETC_BACKUP"
fi
cp "$SLURM_CONF" "$ETC_CONF"

# ---------------------------------------------------------------- 3. daemons
# Each runs in the foreground (no fork) in the background of this script; its pid goes to the
# same pidfile that the daemon itself writes, and the EXIT trap stops it from there.
munged --foreground --force --socket="$MUNGE_SOCKET" --key-file="$TMP/munge/munge.key" \
    --pid-file="$TMP/run/munged.pid" --log-file="$TMP/log/munged.log" \
    --seed-file="$TMP/munge/munged.seed" </dev/null >>"$TMP/log/munged.out" 2>&1 9>&- &
echo $! >"$TMP/run/munged.pid"
for i in $(seq 50); do
    [[ -S $MUNGE_SOCKET ]] && break
    sleep 0.2
done
[[ -S $MUNGE_SOCKET ]] || die "munged did not create its socket within 10 s"
timeout 10 munge -S "$MUNGE_SOCKET" -n </dev/null | timeout 10 unmunge -S "$MUNGE_SOCKET" >/dev/null \
    || die "munge round trip failed"

SLURM_UP=yes
slurmctld -D -f "$SLURM_CONF" </dev/null >>"$TMP/log/slurmctld.out" 2>&1 9>&- &
echo $! >"$TMP/run/slurmctld.pid"
slurmd -D -N localhost -f "$SLURM_CONF" </dev/null >>"$TMP/log/slurmd.out" 2>&1 9>&- &
echo $! >"$TMP/run/slurmd.pid"

say "waiting (at most $NODE_TIMEOUT s) for node localhost to come up idle ..."
state=""
for i in $(seq "$NODE_TIMEOUT"); do
    state=$(timeout 5 sinfo -h -n localhost -o %T 2>/dev/null | head -n 1 || true)
    [[ $state == idle ]] && break
    for d in slurmctld slurmd munged; do
        kill -0 "$(<"$TMP/run/$d.pid")" 2>/dev/null || die "$d exited during start-up"
    done
    sleep 1
done
[[ $state == idle ]] || die "node localhost is '${state:-not listed}' after $NODE_TIMEOUT s, not idle"
say "node up after $(elapsed) s: $(sinfo -h -o '%P %D %c CPUs %m MB %T')"

# ---------------------------------------------------------------- 4. executor plugin
say "installing the executor plugin into .venv (pip install -e '.[cluster]') ..."
timeout 600 .venv/bin/python -m pip install --quiet -e '.[cluster]' >"$TMP/log/pip.txt" 2>&1 \
    || { tail -n 20 "$TMP/log/pip.txt" >&2; die "pip install -e '.[cluster]' failed"; }
.venv/bin/python -c "import snakemake_executor_plugin_slurm" || die "the slurm executor plugin does not import"

# ---------------------------------------------------------------- 5. the two runs
# One campaign config with the relative outdir "results", run in two working folders: the results
# folders are separate ($TMP/local/results, $TMP/slurm/results), each run has its own .snakemake (so
# nothing here meets another run in the checkout), and the config -- which the tables record in
# their provenance, outdir and input paths included -- is the same for both.
DATA="$TMP/data"
timeout 300 .venv/bin/python -m synthetic_cubes --small "$DATA" --results results >"$TMP/log/generate.txt" 2>&1 \
    || { tail -n 20 "$TMP/log/generate.txt" >&2; die "generating the small scenario failed"; }
LOCAL="$TMP/local/results"
CLUSTER="$TMP/slurm/results"

run_workflow() {
    local name=$1 profile=$2 t
    shift 2
    t=$(date +%s)
    say "run '$name': snakemake --profile $profile $* ..."
    if ! timeout "$RUN_TIMEOUT" .venv/bin/snakemake --snakefile "$REPO/Snakefile" --directory "$TMP/$name" \
        --profile "$profile" --configfile "$DATA/campaign.yaml" "$@" >"$TMP/log/run_$name.txt" 2>&1; then
        tail -n 40 "$TMP/log/run_$name.txt" >&2
        die "the $name run failed (log above; status 124 means it hit the $RUN_TIMEOUT s limit)"
    fi
    say "run '$name' finished in $(( $(date +%s) - t )) s ($(steps "$TMP/log/run_$name.txt") steps)"
}
# "N of N steps (100%) done" -> N
steps() { grep -Eo '[0-9]+ of [0-9]+ steps \(100%\) done' "$1" | tail -n 1 | awk '{print $3}'; }

run_workflow local profiles/workstation
run_workflow slurm profiles/slurm

# The jobs SLURM ran (MinJobAge keeps finished ones visible) and their final states.
timeout 10 squeue -h --states=all -o '%i %T' >"$TMP/log/squeue.txt" || die "squeue failed after the run"
states=$(awk '{print $2}' "$TMP/log/squeue.txt" | sort | uniq -c | awk '{printf "%s %s, ", $1, $2}')
n_slurm=$(wc -l <"$TMP/log/squeue.txt")
n_done=$(awk '$2 == "COMPLETED"' "$TMP/log/squeue.txt" | wc -l)
(( n_slurm > 0 )) || die "squeue lists no job: the slurm run did not go through SLURM"
(( n_done == n_slurm )) || die "not every SLURM job completed: ${states%, }"
n_local=$(steps "$TMP/log/run_local.txt")

# ---------------------------------------------------------------- 6. comparison
for f in limits.ecsv budget.ecsv; do
    [[ -s $LOCAL/$f && -s $CLUSTER/$f ]] || die "$f is missing from one of the runs"
    cmp -s "$LOCAL/$f" "$CLUSTER/$f" || {
        diff "$LOCAL/$f" "$CLUSTER/$f" | cut -c 1-300 | head -n 20 >&2
        die "$f differs between the local and the SLURM run"
    }
done
# Every other result too (report.html with its embedded figures, budget.json, FITS products, the
# per-species tables), except what records the run itself: logs/ and benchmarks/ (timings) and the
# checksum cache .checksums/ (file modification times).
listing() { (cd "$1" && find . -type f -not -path './logs/*' -not -path './benchmarks/*' \
    -not -path './.checksums/*' | LC_ALL=C sort); }
if ! cmp -s <(listing "$LOCAL") <(listing "$CLUSTER"); then
    diff <(listing "$LOCAL") <(listing "$CLUSTER") | head -n 20 >&2
    die "the two runs wrote different sets of result files"
fi
n_files=0
differing=()
while IFS= read -r f; do
    n_files=$(( n_files + 1 ))
    cmp -s "$LOCAL/$f" "$CLUSTER/$f" || differing+=("${f#./}")
done < <(listing "$LOCAL")
if (( ${#differing[@]} )); then
    for f in "${differing[@]:0:3}"; do
        echo "--- $f" >&2
        diff "$LOCAL/$f" "$CLUSTER/$f" 2>/dev/null | cut -c 1-300 | head -n 10 >&2
    done
    die "${#differing[@]} of $n_files result files differ between the runs: ${differing[*]}"
fi

say "summary:"
say "  cluster     one node 'localhost' (${layout}RealMemory=$real_mb MB), partition $PARTITION, squeue status checks"
say "  local run   $n_local jobs (profiles/workstation)"
say "  SLURM run   $n_slurm SLURM jobs: ${states%, } (profiles/slurm)"
say "  tables      limits.ecsv and budget.ecsv byte-identical"
say "  all results $n_files files byte-identical, report.html and budget.json included"
say "              (logs/, benchmarks/ and the checksum cache .checksums/ not compared)"
say "passed in $(elapsed) s"
# The closing line in the plain form CI reads as a test count.
echo "slurm_test: 1 passed, 0 failed"
