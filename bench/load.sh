#!/usr/bin/env bash
# Load test with wrk (Debian package `wrk`), on loopback only, 64 connections, each run bounded
# both in time (-d) and in requests (bench/load.lua stops a thread after its share).
#
#   bash bench/load.sh [SECONDS_PER_RUN] [ROUNDS] [MEMORY_SECONDS]
#
# Builds the release binary, starts `goalsmith serve` on a fresh SQLite database in a temporary
# directory, makes a 640×480 camera, a frame and a goal with two point terms through the API,
# and then takes ROUNDS rounds (default 3) of, in turn:
#   healthz  GET /healthz                                   (the yardstick: no database, no auth)
#   read     GET /api/goals/{id}/revisions/1                 (bearer token, the stored document)
#   cost     POST /api/goals/{id}/revisions/1/cost            1 000 candidates × 1 step × 2 points
#   mixed    90 % revision reads, 10 % POST …/revisions/1/outcomes (a write per request)
# and finally revision reads for MEMORY_SECONDS (default 120) while the server's resident
# memory is sampled every 5 s. Prints one JSON line per run, then a summary table (best round
# of each workload by throughput, and read/healthz throughput per round).
set -euo pipefail
cd "$(dirname "$0")/.."
secs=${1:-10}
rounds=${2:-3}
mem_secs=${3:-120}
conns=64
threads=${GOALSMITH_WRK_THREADS:-2}
# Each thread's request budget: far above what a run reaches in its time on this machine, so the
# time ends a run and the budget only guards against a runaway.
budget=2000000

command -v wrk >/dev/null || { echo "wrk is missing: apt-get install -y wrk" >&2; exit 1; }
cargo build --release --quiet
bin=target/release/goalsmith
work=$(mktemp -d)
server_pid=
cleanup() {
  [ -n "$server_pid" ] && kill "$server_pid" 2>/dev/null || true
  rm -rf "$work"
}
trap cleanup EXIT

db="sqlite://$work/load.db?mode=rwc"
GOALSMITH_LOG=warn "$bin" serve --bind 127.0.0.1:0 --database "$db" --data-dir "$work" \
  >"$work/stdout" 2>"$work/stderr" &
server_pid=$!
for _ in $(seq 1 100); do grep -q '^listening on ' "$work/stdout" 2>/dev/null && break; sleep 0.1; done
base=$(sed -n 's/^listening on //p' "$work/stdout" | head -n1)
[ -n "$base" ] || { cat "$work/stderr" >&2; exit 1; }
case "$base" in http://127.0.0.1:*) ;; *) echo "not on loopback: $base" >&2; exit 1 ;; esac

token=$(GOALSMITH_LOG=warn "$bin" token create --team "load bench" --role editor --database "$db")
json() { curl -fsS -H "Authorization: Bearer $token" -H 'Content-Type: application/json' "$@"; }
field() { python3 -c "import json,sys; print(json.load(sys.stdin)[sys.argv[1]])" "$1"; }

cam=$(json -X POST "$base/api/cameras" -d '{"name": "bench overhead", "width": 640, "height": 480}' | field id)
python3 - "$work/frame.png" <<'PY'
import struct, sys, zlib
w, h = 640, 480
rows = b"".join(b"\x00" + b"".join(bytes(((x * 7 + y * 3) % 256, (x ^ y) % 256, (y * 5) % 256)) for x in range(w)) for y in range(h))
def chunk(t, d):
    return struct.pack(">I", len(d)) + t + d + struct.pack(">I", zlib.crc32(t + d) & 0xFFFFFFFF)
png = b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0)) \
    + chunk(b"IDAT", zlib.compress(rows, 6)) + chunk(b"IEND", b"")
open(sys.argv[1], "wb").write(png)
PY
frame=$(curl -fsS -H "Authorization: Bearer $token" -H 'Content-Type: image/png' \
  --data-binary "@$work/frame.png" "$base/api/cameras/$cam/frames" | field id)
goal=$(json -X POST "$base/api/goals" -d "{\"name\": \"seed tray to the mat\", \"frame_id\": \"$frame\", \"terms\": [
  {\"kind\": \"point\", \"label\": \"tray corner\", \"source\": [100.5, 80.5], \"target\": [420.5, 300.5]},
  {\"kind\": \"point\", \"label\": \"pot rim\", \"source\": [200.5, 150.5], \"target\": [380.5, 260.5]}]}" | field goal_id)
rev="/api/goals/$goal/revisions/1"

python3 - "$work/cost.json" <<'PY'
import json, random, sys
random.seed(7)
pts = [[[[random.uniform(0, 640), random.uniform(0, 480)] for _ in range(2)]] for _ in range(1000)]
json.dump({"points": pts}, open(sys.argv[1], "w"))
PY
echo '{"final_points": [[421.0, 299.0], [381.0, 261.0]], "note": "load bench"}' >"$work/outcome.json"
json -X POST "$base$rev/cost" --data-binary "@$work/cost.json" -o /dev/null
json -X POST "$base$rev/outcomes" --data-binary "@$work/outcome.json" -o /dev/null

run() { # name, then the lua arguments
  local name=$1; shift
  local line
  line=$(wrk -t"$threads" -c"$conns" -d"${secs}s" --timeout 10s -s bench/load.lua "$base" -- "$@" | tail -n1)
  printf '{"run": "%s", "round": %s, %s\n' "$name" "$round" "${line#\{}" | tee -a "$work/results"
}

rss_kb() { awk '/^VmRSS/ {print $2}' "/proc/$server_pid/status"; }
echo "server $base, pid $server_pid, $conns connections, $threads wrk threads, ${secs} s per run; rss $(rss_kb) kB"
for round in $(seq 1 "$rounds"); do
  run healthz get "$budget" "$token" /healthz
  run read get "$budget" "$token" "$rev"
  run cost post "$budget" "$token" "$rev/cost" "$work/cost.json"
  run mixed mixed "$budget" "$token" "$rev" _ "$rev/outcomes" "$work/outcome.json"
done

round=memory
wrk -t"$threads" -c"$conns" -d"${mem_secs}s" --timeout 10s -s bench/load.lua "$base" -- \
  get "$budget" "$token" "$rev" >"$work/memory.out" &
wrk_pid=$!
samples=()
while kill -0 "$wrk_pid" 2>/dev/null; do samples+=("$(rss_kb)"); sleep 5; done
line=$(tail -n1 "$work/memory.out")
printf '{"run": "read-%ss", "round": "memory", %s\n' "$mem_secs" "${line#\{}" | tee -a "$work/results"
echo "resident memory during the ${mem_secs}-s read run, kB every 5 s: ${samples[*]}"

python3 - "$work/results" "${samples[@]}" <<'PY'
import json, sys
rows = [json.loads(l) for l in open(sys.argv[1])]
rss = [int(x) for x in sys.argv[2:] if x]
print("\n| workload | requests/s | p50 | p99 | errors |\n|---|---|---|---|---|")
for name in ["healthz", "read", "cost", "mixed"]:
    runs = [r for r in rows if r["run"] == name]
    best = max(runs, key=lambda r: r["rps"])
    print(f"| {name} (best of {len(runs)}) | {best['rps']:.0f} | {best['p50_ms']:.2f} ms | {best['p99_ms']:.2f} ms | {sum(r['errors'] for r in runs)} |")
for r in rows:
    if r["round"] == "memory":
        print(f"| {r['run']} | {r['rps']:.0f} | {r['p50_ms']:.2f} ms | {r['p99_ms']:.2f} ms | {r['errors']} |")
ratios = []
for rnd in sorted({r["round"] for r in rows if r["round"] != "memory"}):
    h = [r for r in rows if r["round"] == rnd and r["run"] == "healthz"]
    d = [r for r in rows if r["round"] == rnd and r["run"] == "read"]
    if h and d:
        ratios.append(d[0]["rps"] / h[0]["rps"])
print("\nrevision reads ÷ /healthz throughput, per round: " + ", ".join(f"{x:.2f}" for x in ratios))
third = max(1, len(rss) // 3)
mean = lambda xs: sum(xs) / len(xs)
if rss:
    print(f"resident memory over the long run: first {rss[0]/1024:.1f} MiB, max {max(rss)/1024:.1f} MiB, last {rss[-1]/1024:.1f} MiB; "
          f"mean of the last third vs the first third: {mean(rss[-third:])/1024:.1f} vs {mean(rss[:third])/1024:.1f} MiB")
PY
