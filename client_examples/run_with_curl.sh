#!/bin/sh
# Upload one epoch set, start a run, wait for it and print the result, with curl alone
# (python3 only to read fields out of the JSON answers).
#
#   EPOCH_ASSAY_URL=https://epoch-assay.lab.example EPOCH_ASSAY_TOKEN=ea_... \
#     ./run_with_curl.sh READ-01 sub-07 ses-01 sub-07.npz run.json
#
# run.json holds "pipelines" and "scoring" of the run body (see docs/api.md, Runs).
set -eu
STUDY=$1 SUBJECT=$2 SESSION=$3 FILE=$4 SPEC=$5
BASE=${EPOCH_ASSAY_URL:-http://127.0.0.1:8000}
AUTH="Authorization: Bearer ${EPOCH_ASSAY_TOKEN:?set EPOCH_ASSAY_TOKEN to an API key}"

field() { python3 -c 'import json, sys; print(json.load(sys.stdin)[sys.argv[1]])' "$1"; }

# --fail-with-body: exit non-zero on 4xx/5xx but still show the problem+json answer.
EPOCH_SET=$(curl -sS --fail-with-body -H "$AUTH" \
  -H "Idempotency-Key: upload-$STUDY-$SUBJECT-$SESSION-$(sha256sum "$FILE" | cut -c1-32)" \
  -F "file=@$FILE" -F "subject=$SUBJECT" -F "session=$SESSION" \
  "$BASE/v1/studies/$STUDY/epoch-sets" | field id)
echo "epoch set: $EPOCH_SET"

BODY=$(python3 -c 'import json, sys; spec = json.load(open(sys.argv[3]));
print(json.dumps({"study": sys.argv[1], "epoch_sets": [sys.argv[2]], **spec}))' "$STUDY" "$EPOCH_SET" "$SPEC")
RUN=$(curl -sS --fail-with-body -H "$AUTH" -H 'Content-Type: application/json' \
  -H "Idempotency-Key: run-$(printf '%s' "$BODY" | sha256sum | cut -c1-32)" \
  -d "$BODY" "$BASE/v1/runs" | field id)
echo "run: $RUN"

while :; do
  STATUS=$(curl -sS --fail-with-body -H "$AUTH" "$BASE/v1/runs/$RUN" | field status)
  case $STATUS in
    succeeded) break ;;
    failed) curl -sS -H "$AUTH" "$BASE/v1/runs/$RUN" >&2; echo >&2; exit 1 ;;
    *) sleep 1 ;;
  esac
done

curl -sS --fail-with-body -H "$AUTH" "$BASE/v1/runs/$RUN/result?format=csv"
curl -sS --fail-with-body -H "$AUTH" -o "$RUN.html" "$BASE/v1/runs/$RUN/report"
echo "report saved as $RUN.html"
