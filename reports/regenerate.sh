#!/usr/bin/env bash
# Regenerate reports/<name>/ for every demo design in designs/: the results (oc.csv,
# boundaries.csv, run.json), the workflow checks (checks.json and figures), the report
# (report.html, report-tables/) and its PDF.
# Needs headless Chromium for the PDF (Debian/Ubuntu: apt-get install chromium).
# Usage, from anywhere:  bash reports/regenerate.sh
set -euo pipefail
cd "$(dirname "$0")/.."
for design in designs/*.toml; do
  name=$(python -c 'import sys, octrial; print(octrial.load_design(sys.argv[1]).name)' "$design")
  python -m octrial run "$design" --out "reports/$name" --quiet
  status=0
  python -m octrial check "$design" --out "reports/$name" --quiet 2>/dev/null || status=$?
  case $status in
    0) ;;
    2) echo "reports/$name: no workflow checks for this endpoint yet" ;;
    *) echo "reports/$name: a posterior computation failed calibration (see checks.json)" ;;
  esac
  python -m octrial report "reports/$name" --pdf --quiet
  echo "reports/$name: $(du -sh "reports/$name" | cut -f1)"
done
