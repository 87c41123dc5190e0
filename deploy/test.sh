#!/usr/bin/env bash
# Runs the whole test suite against real servers on loopback.
#
# Installs mosquitto, victoria-metrics, promtool (package prometheus) and
# chromium (for the status pages' browser test) from
# the distribution's packages when they are missing, starts one private
# instance of mosquitto and of victoria-metrics on free loopback ports with
# temporary data directories, exports their addresses to the tests, runs
# `go vet` and `go test`, and stops exactly the processes it started (by PID)
# on exit. Extra arguments go to `go test` (e.g. -run TestName).
#
# Before the tests it checks that `go mod tidy` would change nothing and runs
# staticcheck (the pinned version below, installed with `go install` from the
# Go module proxy into a temporary GOBIN when the one on PATH is missing or
# another version).
set -euo pipefail
cd "$(dirname "$0")/.."

log() { printf 'test.sh: %s\n' "$*" >&2; }

need_pkgs=()
[ -x /usr/sbin/mosquitto ] || command -v mosquitto >/dev/null 2>&1 || need_pkgs+=(mosquitto mosquitto-clients)
command -v victoria-metrics >/dev/null 2>&1 || need_pkgs+=(victoria-metrics)
# promtool checks the metrics exposition (the server itself is not started).
command -v promtool >/dev/null 2>&1 || need_pkgs+=(prometheus)
# chromium runs the browser test of the status pages (headless).
command -v chromium >/dev/null 2>&1 || need_pkgs+=(chromium)
if [ ${#need_pkgs[@]} -gt 0 ]; then
	if [ "$(id -u)" != 0 ]; then
		log "missing ${need_pkgs[*]}; install them (as root: apt-get install -y ${need_pkgs[*]})"
		exit 1
	fi
	log "installing ${need_pkgs[*]}"
	apt-get update -qq >/dev/null
	DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${need_pkgs[@]}" >/dev/null
fi
MOSQUITTO=/usr/sbin/mosquitto
[ -x "$MOSQUITTO" ] || MOSQUITTO=$(command -v mosquitto)
VM=$(command -v victoria-metrics)
CHROMIUM=$(command -v chromium)

work=$(mktemp -d)
pids=()
cleanup() {
	for pid in "${pids[@]}"; do
		kill "$pid" 2>/dev/null || true
	done
	for pid in "${pids[@]}"; do
		wait "$pid" 2>/dev/null || true
	done
	rm -rf "$work"
}
trap cleanup EXIT

# free_port prints a loopback TCP port nothing listens on.
free_port() {
	local port
	for _ in $(seq 1 50); do
		port=$((20000 + RANDOM % 30000))
		if ! (exec 3<>"/dev/tcp/127.0.0.1/$port") 2>/dev/null; then
			echo "$port"
			return 0
		fi
	done
	log "no free port found"
	return 1
}

wait_tcp() { # port pid name
	for _ in $(seq 1 100); do
		if (exec 3<>"/dev/tcp/127.0.0.1/$1") 2>/dev/null; then
			kill -0 "$2" 2>/dev/null && return 0
		fi
		kill -0 "$2" 2>/dev/null || { log "$3 exited during start-up"; return 1; }
		sleep 0.1
	done
	log "$3 did not become ready on port $1"
	return 1
}

# STATICCHECK_VERSION is the staticcheck module version the suite must pass.
STATICCHECK_VERSION=v0.8.2

# check_tidy fails when `go mod tidy` would change go.mod or go.sum.
check_tidy() {
	local diff
	if ! diff=$(go mod tidy -diff 2>&1); then
		printf '%s\n' "$diff" >&2
		log "go.mod/go.sum are not tidy (diff above): run 'go mod tidy' and commit go.mod and go.sum"
		return 1
	fi
}

# staticcheck_bin runs staticcheck $STATICCHECK_VERSION with the given
# arguments, installing it into $work/bin when PATH has no such version.
staticcheck_bin() {
	local sc
	sc=$(command -v staticcheck 2>/dev/null || true)
	if [ -z "$sc" ] || ! "$sc" -version 2>/dev/null | grep -qF "(${STATICCHECK_VERSION#v})"; then
		sc="$work/bin/staticcheck"
		if [ ! -x "$sc" ]; then
			log "installing staticcheck $STATICCHECK_VERSION"
			GOBIN="$work/bin" go install "honnef.co/go/tools/cmd/staticcheck@$STATICCHECK_VERSION" ||
				{ log "could not install staticcheck $STATICCHECK_VERSION (needs the Go module proxy)"; return 1; }
		fi
	fi
	"$sc" "$@" || { log "staticcheck found problems (above): fix them; the suite must be clean"; return 1; }
}

check_tidy

mqtt_port=$(free_port)
cat >"$work/mosquitto.conf" <<CONF
listener $mqtt_port 127.0.0.1
allow_anonymous true
persistence false
set_tcp_nodelay true
max_queued_messages 0
log_dest stderr
log_type error
log_type warning
CONF
"$MOSQUITTO" -c "$work/mosquitto.conf" 2>"$work/mosquitto.log" &
pids+=($!)
wait_tcp "$mqtt_port" "${pids[-1]}" mosquitto || { cat "$work/mosquitto.log" >&2; exit 1; }

vm_port=$(free_port)
mkdir -p "$work/vm"
"$VM" -httpListenAddr="127.0.0.1:$vm_port" -storageDataPath="$work/vm" \
	-retentionPeriod=100y -search.latencyOffset=0s -loggerLevel=ERROR >"$work/vm.log" 2>&1 &
pids+=($!)
wait_tcp "$vm_port" "${pids[-1]}" victoria-metrics || { cat "$work/vm.log" >&2; exit 1; }

export ETPULSE_TEST_SERVERS=required
export ETPULSE_TEST_MQTT="tcp://127.0.0.1:$mqtt_port"
export ETPULSE_TEST_MOSQUITTO="$MOSQUITTO"
export ETPULSE_TEST_INFLUX="http://127.0.0.1:$vm_port"
export ETPULSE_TEST_VICTORIA="$VM"
export ETPULSE_TEST_CHROMIUM="$CHROMIUM"
log "mosquitto on $ETPULSE_TEST_MQTT (pid ${pids[0]}), victoria-metrics on $ETPULSE_TEST_INFLUX (pid ${pids[1]})"

go vet ./...
staticcheck_bin ./...
go test -count=1 -timeout 45m "$@" ./...

# The fault suite (gateway/faults): the real binary under SIGKILL, broker
# restarts, store outages and other faults, one summary line per fault.
# Skipped when arguments were given (a targeted run).
if [ $# -eq 0 ]; then
	log "fault suite (about 4 minutes)"
	faults_rc=0
	ETPULSE_FAULTS=1 ETPULSE_FAULTS_SUMMARY="$work/faults.txt" \
		go test -count=1 -v -timeout 8m -run '^TestFaults$' ./gateway/faults/ >"$work/faults.log" 2>&1 || faults_rc=$?
	[ -f "$work/faults.txt" ] && cat "$work/faults.txt"
	if [ "$faults_rc" != 0 ]; then
		grep -vE '^(=== (RUN|PAUSE|CONT)|fault )' "$work/faults.log" | tail -n 80 >&2
		log "fault suite failed (details above)"
		exit "$faults_rc"
	fi
fi
