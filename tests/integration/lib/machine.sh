# Shared test helper: how much of the machine went to work that is not the test's own, between
# two moments. A timing claim about two runs holds only if both ran on the same machine; on a
# shared VM the hypervisor takes CPU (steal) and other programs run. Source it, then:
#     machine_mark PID...     remembers the moment: /proc/stat's "cpu" line, the CPU time of
#                             this shell's waited-for children (bash's `times`) and of each PID
#                             (a process the test started and still runs, e.g. $SERVE_PID)
#     machine_other           sets MACHINE_SHARE to the share (0 to 1) of the machine's CPU time
#                             since the mark that went to steal or to processes other than this
#                             shell's children and the PIDs, and MACHINE_TEXT to it in words
# Sources: proc(5): /proc/stat's "cpu" line gives the time of all CPUs in USER_HZ ticks per state
# (user nice system idle iowait irq softirq steal ...; guest time is counted inside user), and
# /proc/PID/stat's fields 14 and 15 are utime and stime in clock ticks; bash(1) `times` prints
# the shell's and its children's user and system times. USER_HZ from getconf CLK_TCK.

_machine_hz=$(getconf CLK_TCK 2>/dev/null || echo 100)

# The ticks of the states: "busy steal total".
_machine_stat() {
    awk '$1 == "cpu" { busy = $2 + $3 + $4 + $7 + $8; print busy, $9, busy + $5 + $6 + $9 }' \
        /proc/stat
}

_machine_times="${BUILDDIR:?}/.machine-times.$$" # left in the build tree: no trap to share

# This shell's children's user + system seconds, as ticks: bash's `times`, run in this shell
# (a subshell's children start at zero, fork(2)), second line "XmY.YYYs XmY.YYYs".
_machine_children() {
    times >"$_machine_times"
    _MACHINE_CH=$(awk -v hz="$_machine_hz" 'NR == 2 {
        t = 0
        for (i = 1; i <= 2; i++) { split($i, a, "m"); sub("s", "", a[2]); t += a[1] * 60 + a[2] }
        printf "%d\n", t * hz }' "$_machine_times")
}

_machine_pids() {
    local p t=0 f
    for p in $_MACHINE_PIDS; do
        f=$(awk '{ print $14 + $15 }' "/proc/$p/stat" 2>/dev/null) && t=$((t + f))
    done
    echo "$t"
}

machine_mark() {
    _MACHINE_PIDS="$*"
    _MACHINE_STAT=$(_machine_stat)
    _machine_children
    _MACHINE_CHILDREN=$_MACHINE_CH
    _MACHINE_OWN=$(_machine_pids)
}

machine_other() {
    local now children own
    now=$(_machine_stat)
    _machine_children
    children=$_MACHINE_CH
    own=$(_machine_pids)
    read -r MACHINE_SHARE MACHINE_TEXT < <(awk -v a="$_MACHINE_STAT" -v b="$now" \
        -v own=$((children - _MACHINE_CHILDREN + own - _MACHINE_OWN)) 'BEGIN {
        split(a, x, " "); split(b, y, " ")
        busy = y[1] - x[1]; steal = y[2] - x[2]; total = y[3] - x[3]
        other = busy - own; if (other < 0) other = 0
        if (total < 1) total = 1
        printf("%.3f other programs %.1f %%, steal %.1f %% of the machine\n",
            (other + steal) / total, 100 * other / total, 100 * steal / total) }')
    [ -z "${_MACHINE_PROBE_TEXT:-}" ] || MACHINE_TEXT+="; $_MACHINE_PROBE_TEXT"
    _MACHINE_PROBE_TEXT=
}

# A second measure, for pauses the CPU shares above cannot show (a VM descheduled for some
# milliseconds many times a second takes little CPU time but delays every wake-up): a sleeper
# beside the test that asks for 1 ms sleeps and records how late each wake-up was
# (time.sleep, CLOCK_MONOTONIC; Python, no squall code), until it is ended.
#     machine_probe_start     starts it in the background
#     machine_probe_stop      ends it by pid and sets MACHINE_WAKE_P99 (ms late at p99) and
#                             adds its figures to MACHINE_TEXT (call before machine_other, which
#                             then counts its CPU as the test's own)
machine_probe_start() {
    _MACHINE_PROBE_OUT="${BUILDDIR:?}/.machine-probe.$$"
    /usr/bin/python3 -c '
import signal, sys, time
late = []
stop = False
def end(*_):
    global stop
    stop = True
signal.signal(signal.SIGTERM, end)
limit = time.monotonic() + 600  # bounded, even if never ended
while not stop and time.monotonic() < limit:
    t = time.monotonic_ns()
    time.sleep(0.001)
    late.append((time.monotonic_ns() - t) / 1e6 - 1)
late.sort()
q = lambda p: late[min(len(late) - 1, int(p * len(late)))] if late else float("nan")
print("%.3f %.3f %.3f %d" % (q(0.5), q(0.99), late[-1] if late else float("nan"), len(late)))
' >"$_MACHINE_PROBE_OUT" &
    _MACHINE_PROBE_PID=$!
}

machine_probe_stop() {
    local p50 p99 max n
    kill -TERM "$_MACHINE_PROBE_PID" 2>/dev/null
    wait "$_MACHINE_PROBE_PID" 2>/dev/null
    read -r p50 p99 max n <"$_MACHINE_PROBE_OUT"
    rm -f "$_MACHINE_PROBE_OUT"
    MACHINE_WAKE_P99=${p99:-nan}
    _MACHINE_PROBE_TEXT="a 1 ms sleep woke late by p50 ${p50:-?} ms, p99 ${p99:-?} ms, max ${max:-?} ms over ${n:-0} sleeps"
}
