#!/usr/bin/env bash
# Soak benchmark of the agent (a script, not a test): many watches on one
# SQLite source, every one on an every-minute schedule, for some minutes.
# It reports the runs (good and failed), the ticks skipped because a run
# was still going (overlaps), runs that could not be recorded, the outbox,
# and the agent's resident memory and open file descriptors over time.
#
# The source is the demo's district table (plumb demo writes it from a
# fixed seed); the watches cycle through the demo's three kinds (pooled
# volumes, pooled connections, per-district demand regression with
# segments), each under its own name, all notifying the log notifier.
#
#   testdata/soak/soak.sh                 # 200 watches, 10 minutes
#   SOAK_MINUTES=3 testdata/soak/soak.sh  # shorter
#
# Settings (environment): SOAK_WATCHES (200), SOAK_MINUTES (10),
# SOAK_SAMPLE seconds between samples (15), SOAK_JITTER (the agent's
# --jitter, 10s), SOAK_KEEP=1 keeps the working folder (log, store).
# It is CPU-heavy: on a shared machine, run it when others are not
# measuring.
set -euo pipefail

watches=${SOAK_WATCHES:-200}
minutes=${SOAK_MINUTES:-10}
sample=${SOAK_SAMPLE:-15}
jitter=${SOAK_JITTER:-10s}
root=$(cd "$(dirname "$0")/../.." && pwd)
work=$(mktemp -d "${TMPDIR:-/tmp}/plumb-soak.XXXXXX")
pid=

cleanup() {
	if [[ -n $pid ]] && kill -0 "$pid" 2>/dev/null; then
		kill -TERM "$pid" 2>/dev/null || true
		wait "$pid" 2>/dev/null || true
	fi
	if [[ ${SOAK_KEEP:-} == 1 ]]; then
		echo "kept $work" >&2
	else
		rm -rf "$work"
	fi
}
trap cleanup EXIT

echo "building plumb…" >&2
(cd "$root" && go build -o "$work/plumb" ./cmd/plumb)
"$work/plumb" demo --dir "$work/demo" --no-serve >/dev/null 2>&1

# The configuration: watch i is of kind i mod 3.
cfg=$work/soak.yaml
{
	echo "store: sqlite:$work/state.db"
	echo "sources:"
	echo "  districts: sqlite:$work/demo/districts.db"
	echo "notifiers:"
	echo "  log: {log: true}"
	echo "watches:"
	for ((i = 0; i < watches; i++)); do
		case $((i % 3)) in
		0) cols="[temperature_c, rainfall_mm, metered_volume_m3, billed_volume_m3]"; extra="" ;;
		1) cols="[residential_connections, commercial_connections, total_connections]"; extra="" ;;
		2) cols="[temperature_c, rainfall_mm, pressure_bar, metered_volume_m3]"; extra="target: demand_m3, segment_by: district, " ;;
		esac
		printf '  - {name: soak_%03d, source: districts, table: district_daily, columns: %s, %stime_column: day, bucket: day, window: 14 buckets, rescan: 3 buckets, schedule: "* * * * *", notify: [log]}\n' \
			"$i" "$cols" "$extra"
	done
} >"$cfg"
"$work/plumb" config check --config "$cfg" >/dev/null

log=$work/agent.log
"$work/plumb" agent --config "$cfg" --listen off --log-format json --jitter "$jitter" 2>"$log" &
pid=$!
began=$(date +%s)
end=$((began + minutes * 60))

rss_kb() { awk '/^VmRSS:/ {print $2}' "/proc/$1/status" 2>/dev/null || echo 0; }
fds() { ls "/proc/$1/fd" 2>/dev/null | wc -l; }
mb() { awk -v k="$1" 'BEGIN {printf "%.1f", k / 1024}'; }
count() { grep -c -- "$1" "$log" || true; }

printf 'plumb agent soak: %d watches, every minute, %d minutes, %s cores, %s\n' \
	"$watches" "$minutes" "$(nproc)" "$(cd "$root" && git describe --always --dirty 2>/dev/null || echo '?')"
printf '%8s %9s %5s %6s %7s %8s\n' "elapsed" "RSS (MB)" "fds" "runs" "failed" "overlaps"
rss_min= rss_max=0 fd_min= fd_max=0
while kill -0 "$pid" 2>/dev/null && (($(date +%s) < end)); do
	sleep "$sample"
	kill -0 "$pid" 2>/dev/null || break
	r=$(rss_kb "$pid") f=$(fds "$pid")
	((r > rss_max)) && rss_max=$r
	[[ -z $rss_min || $r -lt $rss_min ]] && rss_min=$r
	((f > fd_max)) && fd_max=$f
	[[ -z $fd_min || $f -lt $fd_min ]] && fd_min=$f
	printf '%7ds %9.1f %5d %6d %7d %8d\n' "$(($(date +%s) - began))" "$(mb "$r")" "$f" \
		"$(count '"msg":"run","component":"runner"')" "$(grep '"msg":"run","component":"runner"' "$log" | grep -c '"status":"failed"' || true)" \
		"$(count 'tick skipped')"
done
if ! kill -0 "$pid" 2>/dev/null; then
	echo "the agent stopped by itself:" >&2
	tail -5 "$log" >&2
	exit 1
fi
stop_at=$(date +%s)
kill -TERM "$pid"
wait "$pid" && status=0 || status=$?
stopped=$(($(date +%s) - stop_at))
pid=

runs=$(count '"msg":"run","component":"runner"')
failed=$(grep '"msg":"run","component":"runner"' "$log" | grep -c '"status":"failed"' || true)
echo
echo "closing note"
printf '  duration            %d min (%d s), stopped in %d s with exit %d\n' "$minutes" "$((stop_at - began))" "$stopped" "$status"
printf '  runs                %d (%d failed); ideal %d (a first run and one per minute each)\n' "$runs" "$failed" "$((watches * (minutes + 1)))"
printf '  overlaps            %d ticks skipped because the run was still going\n' "$(count 'tick skipped')"
printf '  not recorded        %d runs\n' "$(count 'not recorded\|could not be recorded')"
printf '  panics              %d\n' "$(count 'run panicked')"
printf '  RSS                 %.1f to %.1f MB\n' "$(mb "$rss_min")" "$(mb "$rss_max")"
printf '  open descriptors    %d to %d\n' "$fd_min" "$fd_max"
if command -v sqlite3 >/dev/null; then
	printf '  store runs          %s recorded, %s watches\n' "$(sqlite3 "$work/state.db" 'SELECT count(*) FROM plumb_runs')" \
		"$(sqlite3 "$work/state.db" 'SELECT count(DISTINCT watch) FROM plumb_runs')"
	printf '  outbox              %s\n' "$(sqlite3 "$work/state.db" "SELECT count(*) || ' entries, ' || count(delivered_at) || ' delivered, ' || count(given_up_at) || ' given up' FROM plumb_outbox")"
fi
