#!/usr/bin/env bash
# Quick start, part 1: install what is missing, build (Release), start the service on
# config/demo.yaml with an empty data folder, invent three years of weekly sales for 2,000
# series of a chain of garden and hardware stores (ending this week), push them week by week,
# show what the service raised, print the planner page's address, and keep it running until
# Ctrl-C.
# Everything stays under build/demo/ (feed.csv, truth.csv with the injected changes, data/).
set -euo pipefail
cd "$(dirname "$0")/.."

deploy/setup.sh
cmake -S . -B build/release -G Ninja -DCMAKE_BUILD_TYPE=Release -DFOREWARDEN_TESTS=OFF >/dev/null
cmake --build build/release --target forewarden

bin=build/release/daemon/forewarden
out=build/demo
port=${FOREWARDEN_DEMO_PORT:-8700}
rm -rf "$out/data"
mkdir -p "$out"
"$bin" check-config config/demo.yaml
# 156 weeks ending with the current one, so alerts open in the recent past and the staleness
# rules run on today's clock.
start=$(date -u -d "$(date -u +%F) - 155 weeks" +%F)
"$bin" simulate --series 2000 --periods 156 --seed 20261201 --start "$start" \
  --output "$out/feed.csv" --truth "$out/truth.csv"

"$bin" serve --config config/demo.yaml --listen "127.0.0.1:$port" --data "$out/data" \
  > "$out/serve.out" 2> "$out/serve.log" &
pid=$!
trap 'kill -TERM $pid 2>/dev/null; wait $pid 2>/dev/null || true' EXIT
for _ in $(seq 1 100); do
  grep -q "listening on" "$out/serve.out" 2>/dev/null && break
  kill -0 $pid 2>/dev/null || { cat "$out/serve.log"; exit 1; }
  sleep 0.1
done
url="http://127.0.0.1:$port"
echo "demo: service up at $url (log: $out/serve.log)"
"$bin" push "$out/feed.csv" --url "$url" --batch 2000

echo
echo "demo: series raising alerts, largest Trigg's signal first (first 10):"
curl -s "$url/v1/series?status=alerting&sort=trigg&limit=10" | python3 -c '
import json, sys
for s in json.load(sys.stdin)["series"]:
    print("  %-28s %-15s forecast %8.1f  trigg %6.2f  cusum %7.1f  rules %s" % (
        s["key"], s["policy"], s["forecast"] or 0, s["trigg_signal"] or 0, s["cusum_signal"] or 0,
        ",".join(a["rule"] for a in s["alerts"])))'
first=$(curl -s "$url/v1/series?status=alerting&sort=trigg&limit=1" | python3 -c 'import json,sys; print(json.load(sys.stdin)["series"][0]["key"])')

echo
echo "demo: open alerts, newest first (first 10 of those the log sink wrote to $out/serve.log):"
curl -s "$url/v1/alerts?state=open&limit=10" | python3 -c '
import json, sys
for a in json.load(sys.stdin)["alerts"]:
    print("  #%-6d %-28s %-14s %-7s %-8s since %s" % (
        a["id"], a["series"], a["policy"], a["rule"], a["severity"], a["opened_period"]))'
alert=$(curl -s "$url/v1/alerts?state=open&limit=1" | python3 -c 'import json,sys; a=json.load(sys.stdin)["alerts"]; print(a[0]["id"] if a else 1)')
snooze_to=$(date -u -d "$(date -u +%F) + 14 days" +%F)
cat <<EOT

The planner page: $url/
  (the attention list; open a series for its charts, alerts and actions)

Where to look with curl (the service keeps running; Ctrl-C stops it):
  curl -s '$url/v1/policies'
  curl -s '$url/v1/series?status=alerting&sort=cusum&limit=20'
  curl -s '$url/v1/series/$first'
  curl -s '$url/v1/series/$first/history'
  curl -s -X POST '$url/v1/series/$first/reset' -d '{"to": "last", "who": "you", "note": "checked"}'
  curl -s '$url/v1/alerts?state=open&rule=shift'
  curl -s '$url/v1/alerts/$alert'
  curl -s -X POST '$url/v1/alerts/$alert/acknowledge' -d '{"by": "you", "note": "looking"}'
  curl -s -X POST '$url/v1/alerts/$alert/snooze' -d '{"by": "you", "until": "$snooze_to"}'
  injected changes to compare with: $out/truth.csv
EOT
wait $pid
