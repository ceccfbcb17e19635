#!/usr/bin/env bash
# A real Slurm scheduler on this one machine: installs Debian's slurm-wlm and munge, starts
# munged, slurmctld and slurmd on loopback (one node, no cgroups), runs the demo manifest as
# a two-task job array (`sbatch --wait --array=0-1`), then the finishing job (multi-temporal
# stack) after it, and checks that both shards built their flights and that the output
# root equals a local run byte for byte. Needs root (CI runs it as root); scratch under
# $XCHECK_ROOT. The daemons it started are stopped on exit, by process id.
set -euo pipefail
cd "$(dirname "$0")/../.."
REPO=$(pwd)
export DEBIAN_FRONTEND=noninteractive
say() { printf '[slurm] %s\n' "$*"; }
die() { printf '[slurm] FAILED: %s\n' "$*" >&2; exit 1; }

[[ $(id -u) -eq 0 ]] || die "run as root: the daemons are started as root on a scratch configuration"

if ! command -v sbatch >/dev/null || ! command -v munged >/dev/null; then
    say "installing slurm-wlm and munge"
    apt-get update -qq
    apt-get install -y -qq --no-install-recommends slurm-wlm munge >/dev/null
fi

SR="${XCHECK_ROOT:-$(mktemp -d)}/slurm"
rm -rf "$SR"
mkdir -p "$SR"/{state,spool,jobs}
chmod 700 "$SR"
PIDS=()
cleanup() {
    local pid
    for pid in "${PIDS[@]}"; do
        kill "$pid" 2>/dev/null || true
    done
    for pid in "${PIDS[@]}"; do
        wait "$pid" 2>/dev/null || true
    done
}
show_logs() {
    for f in "$SR"/munged.log "$SR"/slurmctld.log "$SR"/slurmd.log "$SR"/jobs/*.log; do
        [[ -f "$f" ]] && { echo "--- $f (last lines)"; tail -n 30 "$f"; }
    done
    return 0
}
trap 'status=$?; [[ $status -ne 0 ]] && show_logs; cleanup; exit $status' EXIT

say "building terrastack (release)"
cargo build --release --quiet
BIN="$REPO/target/release/terrastack"

say "starting munged"
dd if=/dev/urandom of="$SR/munge.key" bs=1024 count=1 status=none
chmod 400 "$SR/munge.key"
munged --foreground --force --socket="$SR/munge.socket" --key-file="$SR/munge.key" \
    --pid-file="$SR/munged.pid" --log-file="$SR/munged.log" --seed-file="$SR/munged.seed" &
PIDS+=($!)
timeout 30 bash -c "until [[ -S '$SR/munge.socket' ]]; do sleep 0.5; done" \
    || die "munged did not create its socket within 30 s"

CPUS=$(nproc)
cat > "$SR/slurm.conf" <<CONF
ClusterName=terrastack-ci
SlurmctldHost=localhost(127.0.0.1)
SlurmUser=root
SlurmdUser=root
SlurmctldPort=16817
SlurmdPort=16818
AuthType=auth/munge
CredType=cred/munge
AuthInfo=socket=$SR/munge.socket
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SwitchType=switch/none
MpiDefault=none
SchedulerType=sched/builtin
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
ReturnToService=2
StateSaveLocation=$SR/state
SlurmdSpoolDir=$SR/spool
SlurmctldPidFile=$SR/slurmctld.pid
SlurmdPidFile=$SR/slurmd.pid
SlurmctldLogFile=$SR/slurmctld.log
SlurmdLogFile=$SR/slurmd.log
NodeName=localhost NodeAddr=127.0.0.1 CPUs=$CPUS State=UNKNOWN
PartitionName=ci Nodes=localhost Default=YES MaxTime=60 State=UP
CONF
export SLURM_CONF="$SR/slurm.conf"

say "starting slurmctld and slurmd on 127.0.0.1 ($CPUS CPUs)"
slurmctld -D -c -f "$SLURM_CONF" &
PIDS+=($!)
slurmd -D -N localhost -f "$SLURM_CONF" &
PIDS+=($!)
timeout 60 bash -c 'until sinfo -h -o %T 2>/dev/null | grep -Eq "^(idle|mixed)"; do sleep 1; done' \
    || die "the node did not become idle within 60 s ($(sinfo -h -o '%T %E' 2>&1 || true))"
sinfo

export TERRASTACK="$BIN" MANIFEST="$REPO/sample-dsm/flights.toml" OUT_ROOT="$SR/out"
export TERRASTACK_BATCH_FLAGS="--align on" TERRASTACK_MEMORY=1G
say "submitting the two-task array"
cd "$SR/jobs"
timeout 900 sbatch --wait --array=0-1 --output="$SR/jobs/array-%A_%a.log" \
    "$REPO/scripts/slurm/batch-array.sbatch" || die "the job array failed"
for i in 0 1; do
    [[ -f "$OUT_ROOT/batch-report-shard-$i-of-2.json" ]] || die "shard $i wrote no report"
done
python3 - "$OUT_ROOT" <<'PY' || die "the shards' reports are not as expected"
import json, sys
from pathlib import Path
root = Path(sys.argv[1])
ids = []
for i in range(2):
    r = json.loads((root / f"batch-report-shard-{i}-of-2.json").read_text())
    assert r["shard"] == f"{i}/2", r["shard"]
    for f in r["flights"]:
        assert f["status"] == "built", f
        assert (root / "flights" / f["id"] / "stack.json").exists(), f["id"]
        ids.append(f["id"])
    print(f"shard {i}/2 built: {', '.join(f['id'] for f in r['flights'])}")
# Flights sorted by id (autumn, spring, summer), round robin: shard 0 takes autumn and summer.
assert sorted(ids) == ["autumn", "spring", "summer"], ids
PY
say "submitting the finishing job (multi-temporal stack)"
timeout 600 sbatch --wait --output="$SR/jobs/finish-%j.log" \
    "$REPO/scripts/slurm/batch-array.sbatch" || die "the finishing job failed"
python3 -c "
import json, sys
r = json.load(open('$OUT_ROOT/batch-report.json'))
assert all(f['status'] == 'skipped' for f in r['flights']), r['flights']
assert r['temporal']['status'] == 'built', r['temporal']
" || die "the finishing job rebuilt a flight or missed the multi-temporal stack"
cd "$REPO"

say "local run of the same manifest for comparison"
"$BIN" batch "$MANIFEST" --out "$SR/local" --align on --jobs 2 --quiet
python3 - "$OUT_ROOT" "$SR/local" <<'PY' || die "the Slurm run differs from the local run"
import sys
from pathlib import Path
a, b = Path(sys.argv[1]), Path(sys.argv[2])
def files(root):
    return {p.relative_to(root).as_posix(): p.read_bytes()
            for p in root.rglob("*") if p.is_file() and not p.name.startswith("batch-report")}
fa, fb = files(a), files(b)
assert sorted(fa) == sorted(fb), (sorted(set(fa) ^ set(fb)))
diff = [k for k in fa if fa[k] != fb[k]]
assert not diff, diff
print(f"{len(fa)} files identical byte for byte (reports aside)")
PY
say "passed"
