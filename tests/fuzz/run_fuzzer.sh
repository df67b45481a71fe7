#!/bin/sh
# A short libFuzzer run as a test: FUZZER DICT CORPUS SECONDS MAX_LEN. New inputs go to a
# scratch folder (the seed corpus is only read), crash files into it too; exit status is the
# fuzzer's (nonzero on a crash, a leak, a timeout or a sanitizer report).
set -eu
bin=$1 dict=$2 corpus=$3 secs=$4 maxlen=$5
work=$(mktemp -d "${TMPDIR:-/tmp}/brume-fuzz.XXXXXX")
trap 'rm -rf "$work"' EXIT
mkdir "$work/new"
"$bin" -dict="$dict" -max_len="$maxlen" -max_total_time="$secs" -timeout=10 -rss_limit_mb=2048 \
  -artifact_prefix="$work/" -print_final_stats=1 "$work/new" "$corpus"
