#!/usr/bin/env bash
# chromium-check.sh HTML_FILE SCREENSHOT_PNG
#
# Opens a self-contained HTML report in Debian's headless Chromium, saves a 1280x2000 PNG
# screenshot of it, and exits 1 (printing every problem) when the page
#   - calls console.error or console.assert with a false condition,
#   - throws an uncaught exception or leaves a promise rejection unhandled,
#   - makes any request that is not data:, blob:, about: or the report file itself
#     (a network fetch or a sibling file: the report must carry everything inline),
#   - or gets an error from the browser's own log (failed loads, CSP, ...).
# Exit 0 when clean, 1 for a page problem (or a page that never loads), 2 when the check
# itself cannot run (usage, missing tools, browser crash). Needs chromium (apt) and python3 (stdlib only).
#
# How: Chromium's DevTools protocol over --remote-debugging-pipe (fd 3 = commands in, fd 4 =
# replies/events out, each JSON message ended by a NUL byte; Chrome DevTools Protocol docs).
# The driver attaches to a blank tab, enables Runtime/Log/Network/Page and only then navigates,
# so nothing the page does from its first script on is missed. Why not simpler options:
#   --enable-logging=stderr prints console.log, .warn and .error all as "INFO:CONSOLE" (no level),
#     and prints nothing for a failed <img>; --dump-dom + window.onerror would change the page.
#
# Environment: CHROMIUM (binary, default /usr/lib/chromium/chromium, else `chromium`),
#   CHECK_SETTLE_MS (quiet time after the load event before the screenshot, default 500),
#   CHECK_TIMEOUT_S (whole run, default 30), CHECK_WIDTH / CHECK_HEIGHT (default 1280 / 2000).
set -euo pipefail

if [ $# -ne 2 ]; then
    echo "usage: $0 HTML_FILE SCREENSHOT_PNG" >&2
    exit 2
fi
[ -f "$1" ] || { echo "chromium-check: no such file: $1" >&2; exit 2; }
command -v python3 >/dev/null || { echo "chromium-check: python3 not found" >&2; exit 2; }

# Debian's /usr/bin/chromium is a sh wrapper that adds flags (extensions, GPU rasterization)
# and on this machine prints "[: ...: unexpected operator" (/dev/shm is mounted twice, so its
# findmnt free-space test gets two numbers); the real binary beside it needs none of that.
if [ -z "${CHROMIUM:-}" ]; then
    if [ -x /usr/lib/chromium/chromium ]; then CHROMIUM=/usr/lib/chromium/chromium
    elif command -v chromium >/dev/null; then CHROMIUM=$(command -v chromium)
    else echo "chromium-check: chromium not found: apt-get install chromium" >&2; exit 2
    fi
fi
export CHROMIUM

# A fresh profile per run: a reused one carries caches, service workers and crash state.
PROFILE=$(mktemp -d "${TMPDIR:-/tmp}/chromium-check.XXXXXX")
trap 'rm -rf "$PROFILE"' EXIT
export PROFILE

python3 - "$1" "$2" <<'PY'
import json, os, select, subprocess, sys, time, base64, pathlib, signal

html = pathlib.Path(sys.argv[1]).resolve()
shot = pathlib.Path(sys.argv[2])
page_url = html.as_uri()
settle = int(os.environ.get("CHECK_SETTLE_MS", "500")) / 1000.0
deadline = time.monotonic() + float(os.environ.get("CHECK_TIMEOUT_S", "30"))
width = int(os.environ.get("CHECK_WIDTH", "1280"))
height = int(os.environ.get("CHECK_HEIGHT", "2000"))

flags = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
    "--disable-default-apps", "--disable-domain-reliability", "--disable-breakpad",
    "--disable-client-side-phishing-detection", "--no-pings", "--metrics-recording-only",
    "--disable-features=Translate,OptimizationHints,MediaRouter,NetworkTimeServiceQuerying",
    # Even with the flags above Chromium still tries update/sign-in hosts (seen here with a
    # loopback sink as proxy). The resolver rule fails every host name and, as tested here, IP
    # literals too (even the proxy's own 127.0.0.1), so no connection is made at all; the proxy
    # to a closed loopback port is a second fence should a later Chromium narrow that rule.
    # The page's own attempts still show up in the Network domain and are reported below.
    "--proxy-server=127.0.0.1:9", "--proxy-bypass-list=<-loopback>",
    "--host-resolver-rules=MAP * ~NOTFOUND",
    "--user-data-dir=" + os.environ["PROFILE"],
    f"--window-size={width},{height}", "--hide-scrollbars",
    "--remote-debugging-pipe", "about:blank",
]

# Pipes for the protocol: the browser reads fd 3 and writes fd 4.
to_r, to_w = os.pipe()
from_r, from_w = os.pipe()
def child_fds():
    # In the child, after fork: move both ends out of the way first (one of them may already
    # be fd 3 or 4), then dup2 onto 3/4; dup2 clears close-on-exec, every other fd keeps it.
    import fcntl
    a = fcntl.fcntl(to_r, fcntl.F_DUPFD, 10)
    b = fcntl.fcntl(from_w, fcntl.F_DUPFD, 10)
    os.dup2(a, 3)
    os.dup2(b, 4)
stderr_log = open(os.path.join(os.environ["PROFILE"], "stderr.log"), "wb")
# close_fds=False: subprocess would otherwise close 3/4 after preexec_fn has set them up.
proc = subprocess.Popen([os.environ["CHROMIUM"], *flags], stdin=subprocess.DEVNULL,
                        stdout=subprocess.DEVNULL, stderr=stderr_log, close_fds=False,
                        preexec_fn=child_fds, start_new_session=True)
os.close(to_r); os.close(from_w)

buf = b""
next_id = 0
events = []          # (method, params) of the page session, in arrival order
replies = {}

def send(method, params=None, session=None):
    global next_id
    next_id += 1
    msg = {"id": next_id, "method": method, "params": params or {}}
    if session: msg["sessionId"] = session
    os.write(to_w, json.dumps(msg).encode() + b"\0")
    return next_id

def setup_failure(msg):
    """The browser itself failed (not the page): exit 2 with the tail of its stderr."""
    stderr_log.flush()
    tail = pathlib.Path(stderr_log.name).read_text(errors="replace").splitlines()[-20:]
    print(f"chromium-check: {msg}\n  chromium stderr (last lines):\n    " + "\n    ".join(tail), file=sys.stderr)
    os._exit(2)

def pump(timeout):
    """Read whatever arrives within timeout seconds; return True if anything came."""
    global buf
    r, _, _ = select.select([from_r], [], [], max(0.0, timeout))
    if not r: return False
    chunk = os.read(from_r, 1 << 20)
    if not chunk: setup_failure("browser closed the DevTools pipe (crashed or refused to start)")
    buf += chunk
    while b"\0" in buf:
        raw, buf = buf.split(b"\0", 1)
        m = json.loads(raw)
        if "id" in m: replies[m["id"]] = m
        else: events.append((m.get("method"), m.get("params", {})))
    return True

def left(): return deadline - time.monotonic()

def call(method, params=None, session=None):
    i = send(method, params, session)
    while i not in replies:
        if left() <= 0: raise SystemExit(f"chromium-check: timed out waiting for {method}")
        pump(left())
    m = replies.pop(i)
    if "error" in m: setup_failure(f"{method} failed: {m['error']}")
    return m.get("result", {})

def stop_browser():
    try: send("Browser.close")
    except OSError: pass
    try: proc.wait(timeout=5)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL); proc.wait()

try:
    # The about:blank tab given on the command line can register a moment after the pipe opens.
    page = None
    while page is None:
        page = next((t for t in call("Target.getTargets")["targetInfos"] if t["type"] == "page"), None)
        if page is None:
            if left() <= 0: raise SystemExit("chromium-check: no page target appeared")
            time.sleep(0.05)
    sid = call("Target.attachToTarget", {"targetId": page["targetId"], "flatten": True})["sessionId"]
    for domain in ("Runtime", "Log", "Network", "Page"):
        call(domain + ".enable", session=sid)
    # --window-size is the outer window: the new headless mode leaves a shorter viewport
    # (1280x1857 for 1280,2000 here), so pin the page's viewport itself.
    call("Emulation.setDeviceMetricsOverride",
         {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False}, session=sid)
    call("Page.navigate", {"url": page_url}, session=sid)
    # Wait for the load event, then until nothing has arrived for `settle` seconds.
    while not any(m == "Page.loadEventFired" for m, _ in events):
        if left() <= 0: raise SystemExit(f"chromium-check: {html}: page did not finish loading in time")
        pump(left())
    quiet_since = time.monotonic()
    while time.monotonic() - quiet_since < settle and left() > 0:
        if pump(settle - (time.monotonic() - quiet_since)): quiet_since = time.monotonic()
    png = call("Page.captureScreenshot", {"format": "png"}, session=sid)["data"]
    shot.write_bytes(base64.b64decode(png))
finally:
    stop_browser()

def where(p):
    st = p.get("stackTrace") or {}
    f = (st.get("callFrames") or [{}])[0]
    url = p.get("url") or f.get("url") or ""
    line = p.get("lineNumber", f.get("lineNumber"))
    return f" ({url}:{line + 1 if isinstance(line, int) else '?'})" if url else ""

def arg_text(a):
    return str(a.get("value", a.get("description", a.get("unserializableValue", a.get("type")))))

# A rejection handled later (e.g. a .catch attached after a tick) is revoked by the browser.
revoked = {p.get("exceptionId") for m, p in events if m == "Runtime.exceptionRevoked"}

problems = []
for method, p in events:
    if method == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
        problems.append(f"console.{p['type']}: " + " ".join(arg_text(a) for a in p.get("args", [])) + where(p))
    elif method == "Runtime.exceptionThrown":
        d = p.get("exceptionDetails", {})
        if d.get("exceptionId") in revoked: continue
        text = (d.get("exception") or {}).get("description") or ""
        # d["text"] is "Uncaught" or "Uncaught (in promise)"; description starts "Error: ...".
        problems.append(f"{d.get('text', 'Uncaught')} {text.splitlines()[0] if text else ''}".strip() + where(d))
    elif method == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
        e = p["entry"]
        problems.append(f"browser log ({e.get('source')}): {e.get('text')}" + (f" [{e['url']}]" if e.get("url") else ""))
    elif method == "Network.requestWillBeSent":
        url = p.get("request", {}).get("url", "")
        scheme = url.split(":", 1)[0]
        if scheme in ("data", "blob", "about") or url.split("#")[0] == page_url:
            continue
        problems.append(f"request for an outside resource: {url}")

print(f"chromium-check: {html}: {len(problems)} problem(s); screenshot {shot}", file=sys.stderr)
for line in problems: print("  " + line, file=sys.stderr)
sys.exit(1 if problems else 0)
PY
