#!/usr/bin/env bash
# Renders a run's report.html the way a reader would see and print it: a screenshot
# and a PDF by headless Chromium (Debian's `chromium`, installed here if missing).
#
#   experiments/render_report.sh [REPORT.html] [OUT_DIR]
#
# Default: runs `slowfield demo -o demo-out` when demo-out/report.html is missing,
# then writes experiments/results/report_render/{report.png,report.pdf}.
set -euo pipefail
cd "$(dirname "$0")/.."
report=${1:-demo-out/report.html}
out=${2:-experiments/results/report_render}
if ! command -v chromium >/dev/null 2>&1; then
    echo "render_report: installing Debian's chromium (needs root and the network)" >&2
    if [ "$(id -u)" -eq 0 ]; then
        apt-get update -q && apt-get install -y -q chromium
    else
        sudo apt-get update -q && sudo apt-get install -y -q chromium
    fi
fi
if [ ! -f "$report" ]; then
    if [ "$report" = demo-out/report.html ]; then
        cargo run --release -- demo -o demo-out
    else
        echo "render_report: $report does not exist" >&2
        exit 1
    fi
fi
mkdir -p "$out"
url="file://$(realpath "$report")"
# no network for the page: a self-contained report renders the same without it
flags=(--headless --no-sandbox --disable-gpu --hide-scrollbars --disable-extensions
       --proxy-server=127.0.0.1:9 --proxy-bypass-list='<-loopback>')
chromium "${flags[@]}" --window-size=1400,2600 --screenshot="$out/report.png" "$url" 2>/dev/null
chromium "${flags[@]}" --no-pdf-header-footer --print-to-pdf="$out/report.pdf" "$url" 2>/dev/null
ls -l "$out/report.png" "$out/report.pdf"
if command -v pdfinfo >/dev/null 2>&1; then pdfinfo "$out/report.pdf" | grep -E 'Pages|Page size'; fi
