#!/usr/bin/env bash
# Post the service demo's requests with curl against a running Kinema server, and check
# every response's status (and a few of its fields).
#
#   demo-requests/service/post.sh BASE_URL TOKEN [OUT_DIR [RECEIVER_URL]]
#
# BASE_URL      e.g. http://127.0.0.1:8080
# TOKEN         an API key with the admin scope (`kinema keys create --scope admin`; the
#               write scope does all but the webhook subscription)
# OUT_DIR       where responses and exports are written (default target/demo/service)
# RECEIVER_URL  a webhook receiver (demo-requests/service/receiver.py) to subscribe for the
#               wall's events; the server's KINEMA_WEBHOOK_ALLOW must allow its address
#
# Every structure, name and ID is invented (see README.md). The script can be run
# again on the same database: structures and points are replaced (200 instead of 201)
# and batches are replayed through their Idempotency-Key.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
base="${1:?usage: post.sh BASE_URL TOKEN [OUT_DIR]}"
token="${2:?usage: post.sh BASE_URL TOKEN [OUT_DIR]}"
out="${3:-$here/../../target/demo/service}"
receiver="${4:-}"
mkdir -p "$out"
failures=0

# call NAME EXPECTED_STATUSES METHOD PATH [curl arguments…]
# Writes the body to OUT/NAME and the headers to OUT/NAME.headers; EXPECTED_STATUSES is
# a |-separated list such as 201|200.
call() {
    local name="$1" expected="$2" method="$3" path="$4"
    shift 4
    local status
    status=$(curl -sS -o "$out/$name" -D "$out/$name.headers" -w '%{http_code}' \
        -X "$method" -H "Authorization: Bearer $token" "$@" "$base$path")
    if [[ "|$expected|" == *"|$status|"* ]]; then
        printf '  %-34s %s %-58s -> %s\n' "$name" "$method" "$path" "$status"
    else
        printf '  %-34s %s %-58s -> %s (expected %s)\n' "$name" "$method" "$path" "$status" "$expected" >&2
        head -c 600 "$out/$name" >&2 || true
        echo >&2
        failures=$((failures + 1))
    fi
}


# field FILE PYTHON_EXPRESSION: print a value of a JSON response (d is the document).
field() {
    python3 -c 'import json,sys; d=json.load(open(sys.argv[1])); print(eval(sys.argv[2]))' "$1" "$2"
}

echo "Ashcombe Lane retaining wall (ALRW-01): structure, 40 targets, seven surveys"
call alrw01-structure.json '201|200' PUT /v1/structures/ALRW-01 \
    -H 'Content-Type: application/json' --data-binary "@$here/alrw01/structure.json"
call alrw01-points.json 200 PUT /v1/structures/ALRW-01/points \
    -H 'Content-Type: application/json' --data-binary "@$here/alrw01/points.json"
echo "  the monitoring loop: every arriving survey is analysed per bay half against S0 and"
echo "  compared with the wall's alert rule (thresholds invented for the demo):"
call alrw01-auto-analysis.json 200 PUT /v1/structures/ALRW-01/auto-analysis \
    -H 'Content-Type: application/json' --data-binary "@$here/alrw01/auto-analysis.json"
call alrw01-alert-rule.json '201|200' PUT /v1/structures/ALRW-01/alert-rules/5f1c0c1e-7a2b-4c3d-9e8f-0a1b2c3d4e5f \
    -H 'Content-Type: application/json' --data-binary "@$here/alrw01/alert-rule.json"
if [ -n "$receiver" ]; then
    call alrw01-webhook.json 201 POST /v1/webhooks -H 'Content-Type: application/json' \
        --data-binary "{\"url\": \"$receiver\", \"structure_id\": \"ALRW-01\", \"description\": \"the asset register (demo receiver)\", \"events\": [\"analysis.finished\", \"analysis.failed\", \"alert.raised\", \"alert.cleared\"]}"
    field "$out/alrw01-webhook.json" 'd["secret"]' >"$out/hook-secret"
fi
for s in S0 S1 S2 S3 S4 S5 S6; do
    call "alrw01-batch-$s.json" 201 POST /v1/structures/ALRW-01/batches \
        -H 'Content-Type: text/csv' -H "Idempotency-Key: alrw01-survey-$s" \
        --data-binary "@$here/alrw01/batch-$s.csv"
done
echo "  a logger retrying survey S6 with the same Idempotency-Key gets the first answer again:"
call alrw01-batch-S6-retry.json 201 POST /v1/structures/ALRW-01/batches \
    -H 'Content-Type: text/csv' -H "Idempotency-Key: alrw01-survey-S6" \
    --data-binary "@$here/alrw01/batch-S6.csv"
grep -qi '^idempotent-replayed: true' "$out/alrw01-batch-S6-retry.json.headers" \
    || { echo "  the retry was not marked Idempotent-Replayed" >&2; failures=$((failures + 1)); }
call alrw01-epochs.json 200 GET /v1/structures/ALRW-01/epochs
echo "  the seven surveys queued seven jobs; waiting for them:"
for i in $(seq 1 300); do
    curl -sS -o "$out/alrw01-jobs.json" -H "Authorization: Bearer $token" "$base/v1/structures/ALRW-01/jobs?limit=1000"
    ended=$(field "$out/alrw01-jobs.json" 'sum(j["status"] in ("succeeded", "failed") for j in d["items"] if j["origin"] == "batch")')
    [ "$ended" -ge 7 ] && break
    sleep 0.2
done
call alrw01-alert-states.json 200 GET /v1/structures/ALRW-01/alert-states
call alrw01-alert-events.json 200 GET /v1/structures/ALRW-01/alert-events
python3 - "$out/alrw01-jobs.json" "$out/alrw01-alert-events.json" "$out/alrw01-alert-states.json" <<'PY' || failures=$((failures + 1))
import json, sys
jobs = [j for j in json.load(open(sys.argv[1]))["items"] if j["origin"] == "batch"]
assert len(jobs) == 7 and all(j["status"] == "succeeded" for j in jobs), [j["status"] for j in jobs]
events = json.load(open(sys.argv[2]))["items"]
assert any(e["kind"] == "raised" for e in events), "no level was raised"
for e in events:
    ev = e["evidence"]
    print(f"    {ev['epoch']}  {e['region']:<11} {e['kind']:<15} level {e['from_level']} -> {e['to_level']}"
          f"  e1 = {ev['value']:6.1f} ± {ev['sd']:4.1f} {ev['unit']}")
states = json.load(open(sys.argv[3]))["items"]
now = ", ".join(f"{s['region']} {s['level_name']}" for s in states if s["level"] > 0)
print(f"    now: {now or 'every bay below the first level'}")
PY
if [ -n "$receiver" ]; then
    echo "  the receiver verified and logged the webhook events:"
    python3 - "$out" <<'PY' || failures=$((failures + 1))
import json, os, sys, time
out = sys.argv[1]
alerts = [e for e in json.load(open(os.path.join(out, "alrw01-alert-events.json")))["items"]
          if e["kind"] in ("raised", "cleared")]
want = 7 + len(alerts)
path = os.path.join(out, "webhook-events.jsonl")
for _ in range(300):
    got = [json.loads(l) for l in open(path)] if os.path.exists(path) else []
    if len(got) >= want:
        break
    time.sleep(0.2)
kinds = {}
for e in got:
    kinds[e["type"]] = kinds.get(e["type"], 0) + 1
print("    " + ", ".join(f"{n} {t}" for t, n in sorted(kinds.items())))
assert len(got) == want, f"{len(got)} of {want} events arrived"
assert [e["id"] for e in got if e["type"].startswith("alert.")] == [e["id"] for e in alerts], "alert events out of order"
PY
fi

echo "Hollin Scar landslip (HSLS-03): East-North-Up frame, 12 GNSS antennas given in WGS84"
call hsls03-structure.json '201|200' PUT /v1/structures/HSLS-03 \
    -H 'Content-Type: application/json' --data-binary "@$here/hsls03/structure.json"
call hsls03-points.json 200 PUT /v1/structures/HSLS-03/points \
    -H 'Content-Type: application/json' --data-binary "@$here/hsls03/points.json"
call hsls03-batch.json 201 POST /v1/structures/HSLS-03/batches \
    -H 'Content-Type: application/json' -H "Idempotency-Key: hsls03-2026-11" \
    --data-binary "@$here/hsls03/batch.json"

echo "Analyses, run as jobs and stored with their inputs, parameters and results:"
# wait_job NAME STRUCTURE JOB_ID: poll the job until it has ended (at most 60 s); its
# last state is written to OUT/NAME.
wait_job() {
    local name="$1" sid="$2" job="$3" status i
    for i in $(seq 1 300); do
        curl -sS -o "$out/$name" -H "Authorization: Bearer $token" "$base/v1/structures/$sid/jobs/$job"
        status=$(field "$out/$name" 'd["status"]')
        case "$status" in succeeded|failed) return 0 ;; esac
        sleep 0.2
    done
    echo "  job $job of $sid did not end within 60 s (status $status)" >&2
    failures=$((failures + 1))
    return 1
}
# analyse NAME STRUCTURE BODY FORMATS: queue the analysis (202 and a job), wait for the
# job, then export the result in every format that applies (GeoJSON only where the
# frame is East-North-Up and the result is spatial).
analyse() {
    local name="$1" sid="$2" body="$3" formats="$4"
    call "$name-job.json" 202 POST "/v1/structures/$sid/analyses" \
        -H 'Content-Type: application/json' --data-binary "@$body"
    local job id status
    job=$(field "$out/$name-job.json" 'd["id"]')
    wait_job "$name-job-done.json" "$sid" "$job" || return 0
    id=$(field "$out/$name-job-done.json" 'd["analysis_id"]')
    call "$name.json" 200 GET "/v1/structures/$sid/analyses/$id"
    status=$(field "$out/$name.json" 'd["status"]')
    if [ "$status" != succeeded ]; then
        echo "  $name: the analysis $status: $(field "$out/$name.json" 'd.get("error")')" >&2
        failures=$((failures + 1))
        return
    fi
    for fmt in $formats; do
        call "$name-result.$fmt" 200 GET "/v1/structures/$sid/analyses/$id/result?format=$fmt"
    done
}
analyse alrw01-analysis-S6-delaunay ALRW-01 "$here/alrw01/analysis-S6-delaunay.json" "json csv"
analyse alrw01-analysis-S6-groups ALRW-01 "$here/alrw01/analysis-S6-groups.json" "json csv"
analyse alrw01-analysis-series ALRW-01 "$here/alrw01/analysis-series-groups.json" "json csv"
analyse hsls03-analysis HSLS-03 "$here/hsls03/analysis.json" "json csv geojson"
call alrw01-analyses.json 200 GET '/v1/structures/ALRW-01/analyses?status=succeeded&limit=2'
python3 - "$out/alrw01-analyses.json" <<'PY' || failures=$((failures + 1))
import json, sys
d = json.load(open(sys.argv[1]))
assert len(d["items"]) == 2 and d.get("next_cursor"), "two of three analyses and a cursor"
PY
python3 - "$out/hsls03-analysis-result.geojson" <<'PY' || failures=$((failures + 1))
import json, sys
d = json.load(open(sys.argv[1]))
assert d["type"] == "FeatureCollection" and d["features"], "features"
lon, lat = d["features"][0]["geometry"]["coordinates"][0][0]
assert -2.5 < lon < -2.3 and 54.2 < lat < 54.4, (lon, lat)
PY

echo "Stateless computations (nothing stored):"
call compute-gradient.json 200 POST /v1/compute/gradient \
    -H 'Content-Type: application/json' --data-binary "@$here/compute/gradient.json"
call compute-strain-field.json 200 POST /v1/compute/strain-field \
    -H 'Content-Type: application/json' --data-binary "@$here/compute/strain-field.json"
call compute-rosettes.json 200 POST /v1/compute/rosette \
    -H 'Content-Type: application/json' --data-binary "@$here/compute/rosettes.json"

echo "A reading with NaN is refused with problem details, and nothing is stored:"
printf 'point_id,epoch,ux,uy\nALRW01-T01,2026-03-01T09:00:00Z,NaN,0.1\n' >"$out/bad-batch.csv"
call bad-batch.json 422 POST /v1/structures/ALRW-01/batches \
    -H 'Content-Type: text/csv' --data-binary "@$out/bad-batch.csv"

if [ "$failures" -ne 0 ]; then
    echo "post.sh: $failures request(s) did not get the expected answer" >&2
    exit 1
fi
echo "post.sh: all requests answered as expected; responses in $out"
