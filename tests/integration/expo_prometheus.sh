#!/usr/bin/env bash
# The OpenMetrics case corpus (tests/data/expo/om/) against a reader squall did not write:
# Debian's prometheus server scrapes every case, served by Debian's nginx as
# `application/openmetrics-text; version=1.0.0`, and must find each ok- case healthy and each
# bad- case down with a scrape error. test-expo checks that squall's parser agrees with the same
# names, so both readers take and refuse the same expositions. (The Prometheus 0.0.4 cases are
# checked against promtool inside test-expo.) About 10 s.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/port.sh"
T="$BUILDDIR/expo-prometheus"
rm -rf "$T"
mkdir -p "$T/tmp" "$T/files" "$T/data"
cp "$SRCDIR"/tests/data/expo/om/*.txt "$T/files/"
NPORT=$(free_port)
PPORT=$(free_port)
USER_LINE=""
[ "$(id -u)" = 0 ] && USER_LINE="user root root;"
cat >"$T/nginx.conf" <<CONF
$USER_LINE
daemon off;
worker_processes 1;
pid $T/nginx.pid;
error_log $T/error.log warn;
events { worker_connections 64; }
http {
    client_body_temp_path $T/tmp;
    proxy_temp_path $T/tmp;
    fastcgi_temp_path $T/tmp;
    uwsgi_temp_path $T/tmp;
    scgi_temp_path $T/tmp;
    access_log off;
    types { }
    default_type "application/openmetrics-text; version=1.0.0; charset=utf-8";
    server { listen 127.0.0.1:$NPORT; root $T/files; }
}
CONF
{
    echo "global: {scrape_interval: 1s, scrape_timeout: 900ms}"
    echo "scrape_configs:"
    for f in "$T"/files/*.txt; do
        b=$(basename "$f" .txt)
        echo "- job_name: '$b'"
        echo "  metrics_path: /$b.txt"
        echo "  static_configs: [{targets: ['127.0.0.1:$NPORT']}]"
    done
} >"$T/prometheus.yml"

nginx -c "$T/nginx.conf" -p "$T" &
NGINX_PID=$!
prometheus --config.file="$T/prometheus.yml" --storage.tsdb.path="$T/data" \
    --web.listen-address="127.0.0.1:$PPORT" >"$T/prometheus.log" 2>&1 &
PROM_PID=$!
trap 'stop_pid "$PROM_PID"; stop_pid "$NGINX_PID"' EXIT
wait_port "$NPORT" || { echo "nginx did not start"; cat "$T/error.log"; exit 1; }
wait_port "$PPORT" 100 || { echo "prometheus did not start"; cat "$T/prometheus.log"; exit 1; }

# Until every target has been scraped at least once (health not "unknown"), at most 30 s.
n=$(ls "$T"/files/*.txt | wc -l)
for ((i = 0; i < 60; i++)); do
    curl -s "http://127.0.0.1:$PPORT/api/v1/targets" >"$T/targets.json" || true
    known=$(jq '[.data.activeTargets[] | select(.health != "unknown")] | length' \
        "$T/targets.json" 2>/dev/null || echo 0)
    [ "$known" = "$n" ] && break
    sleep 0.5
done
[ "$known" = "$n" ] || { echo "only $known of $n targets scraped"; exit 1; }

fails=0
while read -r job health err; do
    case "$job" in
    ok-*) want=up ;;
    bad-*) want=down ;;
    *) echo "case $job has no ok-/bad- name"; fails=$((fails + 1)); continue ;;
    esac
    if [ "$health" != "$want" ]; then
        echo "FAIL $job: prometheus says $health ($err), the case's name says $want"
        fails=$((fails + 1))
    fi
done < <(jq -r '.data.activeTargets[] | "\(.labels.job) \(.health) \(.lastError)"' "$T/targets.json")
echo "expo-prometheus: $n OpenMetrics cases, $fails disagreements with prometheus"
[ "$fails" = 0 ]
