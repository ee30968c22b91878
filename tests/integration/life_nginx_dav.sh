#!/usr/bin/env bash
# Teardown against a real server outside the project: Debian's nginx with its WebDAV module
# (`dav_methods PUT DELETE`, nginx docs: ngx_http_dav_module; PUT of a new file answers 201
# Created, of an existing one 204, DELETE 204). The plan PUTs files; after the run the root
# holds exactly the files it held before. With --keep the files stay (counted in the root),
# and `squall cleanup` deletes them.
set -uo pipefail
source "$SRCDIR/tests/integration/lib/port.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/life-nginx-dav"
rm -rf "$T"
mkdir -p "$T/www/gw" "$T/www/tenant" "$T/tmp"
PORT=$(free_port)
USER_LINE=""
[ "$(id -u)" = 0 ] && USER_LINE="user root root;"
cat >"$T/nginx.conf" <<CONF
$USER_LINE
daemon off;
worker_processes 1;
pid $T/nginx.pid;
error_log $T/error.log warn;
events { worker_connections 1024; }
http {
    access_log off;
    client_body_temp_path $T/tmp;
    server {
        listen 127.0.0.1:$PORT;
        root $T/www;
        location /gw/ { dav_methods PUT DELETE; create_full_put_path on; dav_access user:rw; }
        # A tenant's files: every method, PUT and DELETE alike, needs the tenant's header.
        location /tenant/ {
            if (\$http_x_tenant != "north") { return 401; }
            dav_methods PUT DELETE; create_full_put_path on; dav_access user:rw;
        }
    }
}
CONF
NGX_PID=
stop_nginx() {
    if [ -n "$NGX_PID" ] && kill -0 "$NGX_PID" 2>/dev/null; then
        kill -TERM "$NGX_PID"
        wait "$NGX_PID" 2>/dev/null
    fi
    NGX_PID=
}
trap stop_nginx EXIT
nginx -p "$T" -e "$T/error.log" -c "$T/nginx.conf" &
NGX_PID=$!
wait_port "$PORT" || { echo "FAIL: nginx did not listen on $PORT"; cat "$T/error.log"; exit 1; }
files() { find "$T/www/gw" -type f | wc -l; }
echo '{"site":"north"}' >"$T/www/gw/keep-me.json"
BEFORE=$(files)

cat >"$T/dav.yaml" <<YAML
target: {url: "http://127.0.0.1:$PORT", connections: 4, timeout: 2s}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  put-file: {kind: write, method: PUT, path: "/gw/north/gw-{{seq}}.json",
             body: '{"site":"north","stamp":{{now_ns}}}', creates: true}
  read-file: {kind: get, path: "/gw/north/{{pick}}"}
phases:
  - {name: fill, rate: 100/s, duration: 1s, mix: {put-file: 1}}
  - {name: read, rate: 50/s, duration: 1s, mix: {read-file: 1}}
YAML
run_plan "$T/run" "$T/dav.yaml"
expect_rc "the run exits 0 (got $RUN_RC)" "$T/run" 0
rcheck "nginx answered 201 Created to all 100 PUTs" \
    "cell('fill', 'put-file', '2xx')['count'] == 100 and d['sections']['lifecycle']['created'] == 100" \
    "$T/run"
rcheck "reads of picked files found them: 50 x 2xx" "cell('read', 'read-file', '2xx')['count'] == 50" \
    "$T/run"
rcheck "teardown deleted all 100 (nginx answers DELETE with 204)" \
    "d['sections']['lifecycle']['teardown']['deleted'] == 100" "$T/run"
expect "the root holds only its $BEFORE file again (has $(files))" test "$(files)" = "$BEFORE"
expect "and the file that was there before is untouched" test -s "$T/www/gw/keep-me.json"

run_plan "$T/keep" "$T/dav.yaml" --keep
expect_rc "the --keep run exits 0 (got $RUN_RC)" "$T/keep" 0
expect "with --keep the 100 PUT files stay in the root ($(files) files)" \
    test "$(files)" = $((BEFORE + 100))
"$SQUALL" cleanup "$T/keep" >"$T/cleanup.out" 2>&1
CRC=$?
expect "squall cleanup exits 0 (got $CRC)" test "$CRC" = 0
expect "and deletes them" grep -q "100 objects: 100 deleted" "$T/cleanup.out"
expect "and the root is back to $BEFORE file (has $(files))" test "$(files)" = "$BEFORE"

# The target's headers go with every request the run sends, teardown deletes included, and
# with `cleanup --plan`: nginx answers 401 to a DELETE without X-Tenant (its `if` above).
tenant() { find "$T/www/tenant" -type f | wc -l; }
cat >"$T/tenant.yaml" <<YAML
target: {url: "http://127.0.0.1:$PORT", connections: 4, timeout: 2s, headers: {X-Tenant: north}}
accept: [generator-bound] # this test counts: a second of lag of this shared machine is listed, not fatal
requests:
  put-file: {kind: write, method: PUT, path: "/tenant/gw-{{seq}}.json",
             body: '{"site":"north"}', creates: true}
phases:
  - {name: fill, rate: 50/s, duration: 1s, mix: {put-file: 1}}
YAML
run_plan "$T/tenant" "$T/tenant.yaml"
rcheck "with the header every PUT is created: 50 x 201" \
    "d['sections']['lifecycle']['created'] == 50" "$T/tenant"
rcheck "and the teardown's DELETEs carry it too: all 50 deleted, none failed" \
    "d['sections']['lifecycle']['teardown']['deleted'] == 50 and
     d['sections']['lifecycle']['teardown']['failed'] == 0" "$T/tenant"
expect "the tenant's directory is empty again (has $(tenant))" test "$(tenant)" = 0
run_plan "$T/tenant-keep" "$T/tenant.yaml" --keep
expect "with --keep the 50 tenant files stay ($(tenant))" test "$(tenant)" = 50
"$SQUALL" cleanup "$T/tenant-keep" >"$T/cleanup-noplan.out" 2>&1
expect "cleanup without the plan sends no header: nginx refuses all 50 (exit $?, 6)" \
    grep -q "50 objects: 0 deleted, 0 already gone, 50 failed" "$T/cleanup-noplan.out"
"$SQUALL" cleanup "$T/tenant-keep" --plan "$T/tenant.yaml" >"$T/cleanup-plan.out" 2>&1
expect "cleanup --plan sends target.headers: all 50 deleted (exit $?)" \
    grep -q "50 objects: 50 deleted" "$T/cleanup-plan.out"
expect "and the tenant's directory is empty again (has $(tenant))" test "$(tenant)" = 0
exit $FAILED
