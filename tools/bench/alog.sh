#!/usr/bin/env bash
# Log reader benchmark (not a test): generates synthetic logs of 1M and 4M lines (Common,
# Combined, NDJSON, and Combined compressed with gzip) and parses each on one core (taskset -c 0)
# with squall's reader (src/alog/), 3 times; reports the median lines per second, the ratio to
# `wc -l` (plain) or `zcat | wc -l` (gzip) over the same file on the same core in the same run,
# and the parser's peak RSS, which must not grow with the log. Writes the alog section of
# tools/bench/RESULTS.md.
# Usage: tools/bench/alog.sh [BUILDDIR] [SMALL_LINES] [LARGE_LINES]   (default build 1000000
# 4000000; needs about 1.6 GB of disk under BUILDDIR for the 4M-line files; about 2 minutes)
set -uo pipefail
cd "$(dirname "$0")/../.."
BUILDDIR=$(realpath "${1:-build}")
SMALL=${2:-1000000}
LARGE=${3:-4000000}
BENCH="$BUILDDIR/tools/bench/alog-bench"
[ -x "$BENCH" ] || { echo "alog.sh: $BENCH not built (ninja -C $BUILDDIR)"; exit 1; }
W="$BUILDDIR/bench-alog"
rm -rf "$W"
mkdir -p "$W"
trap 'rm -rf "$W"' EXIT

# median of the figures on stdin
median() { sort -g | awk '{ v[NR] = $1 } END { print v[int((NR + 1) / 2)] }'; }
field() { sed -n "s/.* $1=\([^ ]*\).*/\1/p"; }

ROWS=""
for n in "$SMALL" "$LARGE"; do
    for kind in common combined ndjson combined-gz; do
        fmt=${kind%-gz}
        f="$W/$kind-$n.log"
        gz=""
        [ "$kind" = combined-gz ] && { f="$f.gz"; gz=gz; }
        "$BENCH" gen "$fmt" "$n" "$f" $gz || { echo "alog.sh: generating $f failed"; exit 1; }
        bytes=$(stat -c %s "$f")
        rates=""
        base=""
        rss=""
        for rep in 1 2 3; do
            out=$(taskset -c 0 "$BENCH" parse "$f") || { echo "alog.sh: parse $f failed: $out"; exit 1; }
            [ "$(echo "$out" | field records)" = "$n" ] || { echo "alog.sh: $f: wrong count: $out"; exit 1; }
            rates+="$(echo "$out" | field lines_per_s)"$'\n'
            rss+="$(echo "$out" | field peak_rss_kib)"$'\n'
            t0=$(date +%s.%N)
            if [ -n "$gz" ]; then
                taskset -c 0 sh -c "zcat '$f' | wc -l" >/dev/null
            else
                taskset -c 0 wc -l "$f" >/dev/null
            fi
            t1=$(date +%s.%N)
            base+="$(awk -v a="$t0" -v b="$t1" -v n="$n" 'BEGIN { printf "%.0f", n / (b - a) }')"$'\n'
        done
        r=$(printf '%s' "$rates" | median)
        b=$(printf '%s' "$base" | median)
        m=$(printf '%s' "$rss" | sort -g | tail -1)
        ROWS+="| $kind | $n | $((bytes / 1048576)) | $(awk -v r="$r" 'BEGIN { printf "%.2f", r / 1e6 }') | $(awk -v b="$b" 'BEGIN { printf "%.2f", b / 1e6 }') | $(awk -v r="$r" -v b="$b" 'BEGIN { printf "%.2f", r / b }') | $m |"$'\n'
        rm -f "$f"
    done
done

SECTION=$(cat <<MD
<!-- alog:begin (written by tools/bench/alog.sh; edit the script, not this section) -->
## Log readers (\`src/alog/\`)

$(date -u +%Y-%m-%d), $(nproc) CPUs, load average $(cut -d' ' -f1-3 /proc/loadavg) before the
run. \`tools/bench/alog.sh $(basename "$BUILDDIR") $SMALL $LARGE\`: synthetic sensor-gateway logs
(about 1,000 requests/s), each parsed 3 times on CPU 0 by \`alog-bench parse\` (open, probe,
every record); the median is shown. Baseline: \`wc -l\` (plain) or \`zcat | wc -l\` (gzip) over
the same file on the same core in the same run. Peak RSS is the parser process's
\`ru_maxrss\`: it stays flat from $SMALL to $LARGE lines (one 256 KiB buffer and a fixed scratch
area per reader). Goal: at least 1 million lines per second.

| log | lines | MiB | million lines/s | baseline million lines/s | ratio | peak RSS (KiB) |
|---|---|---|---|---|---|---|
${ROWS%$'\n'}
<!-- alog:end -->
MD
)
RES=tools/bench/RESULTS.md
/usr/bin/python3 - "$RES" "$SECTION" <<'PY'
import os, re, sys
path, section = sys.argv[1], sys.argv[2]
text = open(path).read() if os.path.exists(path) else "# Benchmark results\n"
pat = re.compile(r"<!-- alog:begin.*?<!-- alog:end -->", re.S)
text = pat.sub(lambda m: section, text) if pat.search(text) else text.rstrip("\n") + "\n\n" + section + "\n"
open(path, "w").write(text)
PY
echo "alog.sh: wrote the alog section of $RES"
sed -n '/alog:begin/,/alog:end/p' "$RES"
