#!/usr/bin/env bash
# Runs one libFuzzer target for a short, bounded time over its seed corpus (read only: new
# inputs go to a scratch directory that is removed afterwards). Used by `meson test --suite
# fuzz` in a build configured with -Dfuzz=true (see tests/fuzz/README.md).
# Usage: run.sh TARGET SEED_DIR [SECONDS]
set -uo pipefail
target=$1 seeds=$2 seconds=${3:-${FUZZ_SECONDS:-10}}
scratch=$(mktemp -d)
trap 'rm -rf "$scratch"' EXIT
export ASAN_OPTIONS=${ASAN_OPTIONS:-detect_leaks=1:abort_on_error=1}
export UBSAN_OPTIONS=${UBSAN_OPTIONS:-halt_on_error=1:print_stacktrace=1}
# -artifact_prefix: a crashing input lands in the scratch directory's parent only if asked;
# keep it in the build tree so it can be inspected after a failure.
mkdir -p "${BUILDDIR:-.}/fuzz-artifacts"
# libFuzzer's default exit code for a finding is 77, which meson reads as "skipped": use 1.
"$target" -max_total_time="$seconds" -timeout=10 -rss_limit_mb=1024 -print_final_stats=1 \
    -error_exitcode=1 -timeout_exitcode=1 \
    -artifact_prefix="${BUILDDIR:-.}/fuzz-artifacts/" "$scratch" "$seeds"
