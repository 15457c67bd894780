#!/usr/bin/env bash
# Runs the inspector on the bundled demo under Xvfb and saves a screenshot for the README:
# assets/screenshots/inspector.png. Needs the Debian packages xvfb and imagemagick
# (apt-get install -y xvfb imagemagick x11-utils). Runs target/debug/spurion, the dev binary that `cargo test`
# builds for the integration tests (dependencies are optimised in the dev profile); building it with
# `cargo test --no-run` reuses the test build instead of starting a separate one.
#
#   scripts/screenshot.sh [seconds-to-wait] [screen WxH] [out.png]
#
# The screen defaults to 1280x800, the smallest the inspector is laid out for; the window fits
# itself to the screen (src/gui/mod.rs, window_size_for) and the picture is the window alone.
#
# The inspector fills the baseline strip once the first reading is in (SPURION_INSPECTOR_STRIP=0 stops it)
# so the picture shows it; SPURION_FRAME_LOG names a file for the UI pass times.
set -euo pipefail
cd "$(dirname "$0")/.."
for tool in Xvfb import xwininfo; do
    command -v "$tool" >/dev/null || { echo "screenshot.sh needs $tool: apt-get install -y xvfb imagemagick x11-utils" >&2; exit 1; }
done
wait_s="${1:-40}"
screen="${2:-1280x800}"
out="${3:-assets/screenshots/inspector.png}"
mkdir -p "$(dirname "$out")"
cargo test --test suite --no-run
[ -x target/debug/spurion ] || { echo "target/debug/spurion was not built; run cargo test --test suite gui_inspector" >&2; exit 1; }

display=":${SPURION_XVFB_DISPLAY:-87}"
Xvfb "$display" -screen 0 "${screen}x24" -nolisten tcp >/tmp/spurion-xvfb.log 2>&1 &
xvfb_pid=$!
app_pid=""
cleanup() {
    [ -n "$app_pid" ] && kill "$app_pid" 2>/dev/null || true
    kill "$xvfb_pid" 2>/dev/null || true
}
trap cleanup EXIT
sleep 1
# A fresh config folder, so the picture does not show this machine's recent files.
export XDG_CONFIG_HOME
XDG_CONFIG_HOME="$(mktemp -d)"
# Started from an empty folder, so no path of this machine shows (the demo is found beside the
# crate the binary was built from).
bin="$PWD/target/debug/spurion"
neutral="$(mktemp -d)"
(cd "$neutral" && DISPLAY="$display" SPURION_INSPECTOR_STRIP="${SPURION_INSPECTOR_STRIP:-1}" exec "$bin") >/tmp/spurion-gui.log 2>&1 &
app_pid=$!
sleep "$wait_s"
if ! kill -0 "$app_pid" 2>/dev/null; then
    echo "the inspector exited early; its log:" >&2
    cat /tmp/spurion-gui.log >&2
    exit 1
fi
# The window alone (it leaves room on the screen for a title bar and a task bar).
win=$(DISPLAY="$display" xwininfo -name "spurion inspector" | awk '/Window id:/ {print $4}' || true)
DISPLAY="$display" import -window "${win:-root}" "$out"
echo "wrote $out"
