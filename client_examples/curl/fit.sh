#!/usr/bin/env bash
# Fit the warehouse demo data with linfer, twice: as JSON, then as a CSV upload.
#
#   client_examples/curl/fit.sh          # both requests
#   client_examples/curl/fit.sh json     # only the JSON request
#   client_examples/curl/fit.sh csv      # only the CSV request
#
# The service is at $LINFER_URL (default http://127.0.0.1:8000). The answers go to
# stdout: the JSON fit document on one line, then the coefficient table as CSV.
# What is being sent goes to stderr. An error answer (a problem document) is printed
# too, and the script exits non-zero.
set -euo pipefail

BASE_URL="${LINFER_URL:-http://127.0.0.1:8000}"
BASE_URL="${BASE_URL%/}"
DATA="$(cd "$(dirname "$0")/../data" && pwd)"
PART="${1:-all}"

# --fail-with-body: exit 22 on a 4xx/5xx answer, after printing its body.
CURL=(curl --silent --show-error --fail-with-body --max-time 30 --connect-timeout 5)

fit_json() {
  echo "# POST $BASE_URL/v1/fit  (JSON, table layout: $DATA/warehouse_energy_table.json)" >&2
  "${CURL[@]}" -X POST "$BASE_URL/v1/fit" \
       -H 'Content-Type: application/json' \
       --data-binary @"$DATA/warehouse_energy_table.json"
  echo
}

fit_csv() {
  echo "# POST $BASE_URL/v1/fit  (CSV upload: $DATA/warehouse_energy.csv, answer as CSV)" >&2
  "${CURL[@]}" -X POST \
       "$BASE_URL/v1/fit?response_column=kwh&predictor_columns=temp_c,door_openings,pallets_received" \
       -H 'Content-Type: text/csv' \
       -H 'Accept: text/csv' \
       --data-binary @"$DATA/warehouse_energy.csv"
}

case "$PART" in
  json) fit_json ;;
  csv)  fit_csv ;;
  all)  fit_json; fit_csv ;;
  *)    echo "usage: $0 [json|csv|all]" >&2; exit 2 ;;
esac
