#!/bin/sh
# check_report_selftest.sh - proves that check_report.py (the browser check of
# a disposition report) can fail: it passes a good fixture report and fails
# each bad one, naming the expected fault, so that a report that passes it in
# the CLI tests passed because it is good, not because the checker is blind.
#
# The fixtures are built here by report-fixtures/make_reports.py (numpy +
# zlib + struct, no plyledger binary needed): a good report with two colour
# map PNGs embedded, and variants with a misnested/unclosed tag, an external
# image, a <script>, corrupt base64, a truncated PNG, a blank white page and
# no print stylesheet; plus the good report with demands it cannot meet
# (more images, hidden or absent text) and a browser that hangs (the
# checker's timeout must fail it, not hang). The cases run in parallel.
#
# Usage: tests/cli/check_report_selftest.sh        (from anywhere; exit 0 = ok)
# Environment: PL_PYTHON (Debian's python3, default /usr/bin/python3),
# PL_CHROMIUM (default chromium), PL_JOBS (parallel cases, default nproc + 1),
# TMPDIR.
set -u
HERE=$(cd "$(dirname "$0")" && pwd)
PY=${PL_PYTHON:-/usr/bin/python3}
CHROMIUM=${PL_CHROMIUM:-chromium}
JOBS=${PL_JOBS:-$(( $(nproc 2>/dev/null || echo 1) + 1 ))}
CHECK="$HERE/check_report.py"
WORK=$(mktemp -d "${TMPDIR:-/tmp}/check-report-selftest-XXXXXX")
trap 'rm -rf "$WORK"' EXIT
start=$(date +%s)

command -v "$CHROMIUM" >/dev/null 2>&1 || { echo "FAIL: $CHROMIUM not found (Debian package chromium)" >&2; exit 1; }
"$PY" "$HERE/report-fixtures/make_reports.py" "$WORK" >/dev/null || { echo "FAIL: fixtures" >&2; exit 1; }

# a browser that never finishes: the checker must time it out and say so
cat >"$WORK/hung-chromium" <<'EOF'
#!/bin/sh
exec sleep 60
EOF
chmod +x "$WORK/hung-chromium"

# ---- the cases, run in parallel, JOBS at a time -------------------------------
# start NAME FIXTURE ARGS...: check WORK/FIXTURE.html in the background, its
# output (stdout and stderr) to WORK/NAME.out, its exit status to WORK/NAME.rc
launch() {
    name=$1; fixture=$2; shift 2
    (
        "$PY" "$CHECK" "$WORK/$fixture.html" --screenshot "$WORK/$name.png" \
            --chromium "$CHROMIUM" "$@" >"$WORK/$name.out" 2>&1
        echo $? >"$WORK/$name.rc"
    ) &
}
running=0
start() {
    launch "$@"
    running=$((running + 1))
    if [ "$running" -ge "$JOBS" ]; then wait; running=0; fi
}

# the hung browser only sleeps: it runs beside the others, not in their count
launch hung good --min-images 2 --chromium "$WORK/hung-chromium" --timeout 1
start good good --min-images 2 --pdf "$WORK/good.pdf" --expect "Disposition: accepted for continued service" \
    --expect "site WL-07" --expect "TST-0001"
start demands good --min-images 3 --expect "Hidden note" --expect "site WL-99"
start misnested misnested --min-images 2
start external-image external-image --min-images 2
start script script --min-images 2
start corrupt-base64 corrupt-base64 --min-images 2
start truncated-png truncated-png --min-images 2
start blank blank
start no-print-style no-print-style --min-images 2
wait

# ---- the verdicts ---------------------------------------------------------------
FAILS=0
COUNT=0
fail() { FAILS=$((FAILS + 1)); echo "FAIL: $*" >&2; }

# expect NAME EXIT TEXT...: the case exited EXIT and its output holds every TEXT
expect() {
    name=$1; want=$2; shift 2
    COUNT=$((COUNT + 1))
    got=$(cat "$WORK/$name.rc" 2>/dev/null || echo none)
    bad=0
    [ "$got" = "$want" ] || { fail "$name: exit $got, expected $want"; bad=1; }
    for t in "$@"; do
        grep -qF -- "$t" "$WORK/$name.out" || { fail "$name: output lacks '$t'"; bad=1; }
    done
    [ "$bad" -eq 0 ] || sed 's/^/    /' "$WORK/$name.out" >&2
}

expect good 0 "result: ok" "2 <img>, 2 PNG decoded (1: 300x200 8-bit RGB" \
    "screenshot: $WORK/good.png 1240x1754" "2 of 2 images decoded, 3 expected texts checked" \
    "pages, A4"
grep -q FAULT "$WORK/good.out" && fail "good: a fault reported"
head -c 5 "$WORK/good.pdf" 2>/dev/null | grep -q '^%PDF-' || fail "good: --pdf did not keep the PDF"
[ -s "$WORK/good.png" ] || fail "good: no screenshot"

expect hung 1 "FAULT: chromium screenshot: timed out after 1 s" \
    "FAULT: chromium dump-dom: timed out after 1 s" "FAULT: chromium print-to-pdf: timed out after 1 s"
expect demands 1 "FAULT: <body>: 2 <img> elements, at least 3 expected" \
    "FAULT: browser: 2 images decoded, at least 3 expected" \
    "FAULT: rendered text: expected text 'Hidden note' not found" \
    "FAULT: rendered text: expected text 'site WL-99' not found"
expect misnested 1 "FAULT: parse line" "HTML parse error: End tag (b) violates step 1" \
    "End tag (section) seen too early"
expect external-image 1 \
    "FAULT: <img> 2 (alt 'Current map'): src 'https://example.org/maps/wl-07.png' is not a data:image/png;base64 URI" \
    "FAULT: <img> 2 (alt 'Current map'): not decoded in the browser"
expect script 1 "FAULT: <script> 1: <script> present"
expect corrupt-base64 1 "FAULT: <img> 2 (alt 'Current map'): base64 does not decode" \
    "FAULT: <img> 2 (alt 'Current map'): not decoded in the browser"
expect truncated-png 1 "FAULT: <img> 2 (alt 'Current map'): PNG does not decode: truncated 'IDAT' chunk"
expect blank 1 "FAULT: screenshot: blank: 0.00 % of pixels are not white" "FAULT: screenshot: flat: 1 distinct colours"
expect no-print-style 1 "FAULT: <style>: no @media print block" \
    "FAULT: pdf page 1: 612 x 792 pt, not A4 portrait"

# each bad fixture is broken in one way: no fault beyond the expected kinds
only() {
    name=$1; shift
    extra=$(grep '^FAULT' "$WORK/$name.out" | grep -vF "$(printf '%s\n' "$@")")
    [ -z "$extra" ] || fail "$name: unexpected fault: $extra"
}
only misnested "HTML parse error"
only script "<script>"
only truncated-png "PNG does not decode"
only blank "screenshot:"
only no-print-style "no @media print block" "not A4 portrait"

secs=$(( $(date +%s) - start ))
if [ "$FAILS" -ne 0 ]; then
    echo "check_report selftest: $FAILS of $COUNT cases failed (${secs} s)" >&2
    exit 1
fi
echo "check_report selftest: all $COUNT cases as expected (${secs} s)"
exit 0
