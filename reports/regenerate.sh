#!/usr/bin/env bash
# Regenerate reports/<name>/ for every demo design in designs/: the results (oc.csv,
# boundaries.csv, run.json), the workflow checks (checks.json and figures), the report
# (report.html, report-tables/) and its PDF.
# Needs headless Chromium for the PDF (Debian/Ubuntu: apt-get install chromium).
# Usage, from anywhere:  bash reports/regenerate.sh
set -euo pipefail
cd "$(dirname "$0")/.."
for design in designs/*.toml; do
  # the file's own name key (several-arm designs are not read by load_design)
  name=$(python -c 'import sys, tomllib, pathlib; print(tomllib.load(open(sys.argv[1], "rb")).get("name") or pathlib.Path(sys.argv[1]).stem)' "$design")
  python -m octrial run "$design" --out "reports/$name" --quiet
  status=0
  # exit 2: no workflow checks for this design (several-arm designs, for now)
  python -m octrial check "$design" --out "reports/$name" --quiet 2>/dev/null || status=$?
  case $status in
    0) ;;
    2) echo "reports/$name: no workflow checks for this design yet" ;;
    *) echo "reports/$name: a posterior computation failed calibration (see checks.json)" ;;
  esac
  python -m octrial report "reports/$name" --pdf --quiet
  echo "reports/$name: $(du -sh "reports/$name" | cut -f1)"
done
