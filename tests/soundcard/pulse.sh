#!/usr/bin/env bash
# A real sound server for the sound-card tests: PulseAudio, headless, as the current user
# (root in CI), with one float32 48 kHz stereo null sink whose monitor is the default source,
# so that ALSA's `default` device (through the `pulse` plugin) is a bit-exact loopback.
#
#   tests/soundcard/pulse.sh install   apt-get the server, ALSA plugin, headers (CI, as root)
#   tests/soundcard/pulse.sh start     start it; prints `export ...` lines to eval
#   tests/soundcard/pulse.sh stop      stop the server and the monitor reader
#
# State lives in $TRAGUS_PULSE_DIR (default /tmp/tragus-pulse): socket, pid files, configs.
set -euo pipefail
dir="${TRAGUS_PULSE_DIR:-/tmp/tragus-pulse}"
sock="$dir/native"

case "${1:-}" in
install)
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq
    apt-get install -y -qq pulseaudio pulseaudio-utils libasound2-plugins libasound2-dev \
        pkg-config >/dev/null
    ;;
start)
    mkdir -p "$dir"
    # Our own server config: no hardware detection, no idle exit, only the two modules.
    cat >"$dir/default.pa" <<PA
load-module module-native-protocol-unix socket=$sock auth-anonymous=1
load-module module-null-sink sink_name=tragus_loop format=float32le rate=48000 channels=2 channel_map=front-left,front-right
set-default-sink tragus_loop
set-default-source tragus_loop.monitor
PA
    # Read from $XDG_CONFIG_HOME/pulse/daemon.conf (the server has no option for a path).
    mkdir -p "$dir/config/pulse"
    cat >"$dir/config/pulse/daemon.conf" <<PA
exit-idle-time = -1
default-sample-format = float32le
default-sample-rate = 48000
alternate-sample-rate = 48000
default-sample-channels = 2
avoid-resampling = yes
flat-volumes = no
PA
    # ALSA's `default` → PulseAudio (libasound2-plugins' `pulse` plugin), via our own config
    # file so the machine's /etc/asound.conf stays untouched. `handle_underrun true`: a
    # server-side underrun (the server ran out of our samples: samples lost) reaches the
    # client as an xrun (EPIPE → cpal ErrorKind::Xrun) only with this option on. It is the
    # plugin's default in alsa-plugins 1.2.7 (read in its source and its binary), but set
    # here so that a lossy stall is an xrun whatever the installed version says.
    cat >"$dir/asound.conf" <<PA
pcm.!default { type pulse server "unix:$sock" handle_underrun true }
ctl.!default { type pulse server "unix:$sock" }
PA
    # Loaded by a hook of our own that runs after alsa.conf's: alsa.conf's hook loads
    # /etc/alsa/conf.d, whose 99-pulse.conf (pulseaudio package) loads pulse-alsa.conf's
    # `pcm.!default { type pulse }` after every file on ALSA_CONFIG_PATH, so a definition
    # merely appended there is overridden (seen: an invalid option in it was never read)
    # and the plugin found the server through PULSE_SERVER alone. Hooks run in index order
    # and alsa.conf has one (index 0).
    alsa_conf="$dir/alsa-all.conf"
    cat >"$alsa_conf" <<PA
</usr/share/alsa/alsa.conf>
@hooks.1 {
	func load
	files [ "$dir/asound.conf" ]
	errors true
}
PA
    export PULSE_RUNTIME_PATH="$dir/runtime" PULSE_STATE_PATH="$dir/state"
    mkdir -p "$PULSE_RUNTIME_PATH" "$PULSE_STATE_PATH"
    "$0" stop >/dev/null 2>&1 || true
    XDG_CONFIG_HOME="$dir/config" pulseaudio --daemonize=yes --system=no --disallow-exit \
        --exit-idle-time=-1 --use-pid-file=yes -n -F "$dir/default.pa" \
        --log-target="file:$dir/pulse.log"
    for _ in $(seq 50); do
        [ -S "$sock" ] && PULSE_SERVER="unix:$sock" pactl info >/dev/null 2>&1 && break
        sleep 0.1
    done
    PULSE_SERVER="unix:$sock" pactl info >/dev/null
    # An idle null sink sleeps in 2 s blocks; a reader on the monitor keeps it running, and
    # asks for a short latency: the sink renders in blocks of the shortest latency any
    # client asked for, and at parec's default (2 s, seen in `pactl list sinks`) a new
    # stream waited up to a whole block for its first samples, past the rig's 2 s limit.
    PULSE_SERVER="unix:$sock" parec -d tragus_loop.monitor --format=float32le --rate=48000 \
        --channels=2 --latency-msec=10 >/dev/null 2>&1 &
    echo $! >"$dir/parec.pid"
    sleep 2
    {
        echo "export PULSE_SERVER=unix:$sock"
        echo "export ALSA_CONFIG_PATH=$alsa_conf"
        echo "export PULSE_RUNTIME_PATH=$dir/runtime"
        echo "export TRAGUS_PULSE_DIR=$dir"
    } | tee "$dir/env"
    ;;
stop)
    if [ -f "$dir/parec.pid" ]; then
        kill "$(cat "$dir/parec.pid")" 2>/dev/null || true
        rm -f "$dir/parec.pid"
    fi
    PULSE_RUNTIME_PATH="$dir/runtime" pulseaudio --kill 2>/dev/null || true
    for f in "$dir"/runtime/pid; do
        [ -f "$f" ] && kill "$(cat "$f")" 2>/dev/null || true
    done
    ;;
*)
    echo "usage: $0 install|start|stop" >&2
    exit 2
    ;;
esac
