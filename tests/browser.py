"""A headless Chromium driven over the DevTools protocol on a pipe (no network port, no
extra library): load a page from disk with every network request blocked, and report
what it asked for, what it logged as an error, what it drew and a screenshot.

Chromium reads protocol messages from its fd 3 and writes to its fd 4, each a JSON
text ended by a NUL byte (Chrome DevTools Protocol, `--remote-debugging-pipe`).
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import select
import shutil
import subprocess
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import List, Optional

CANDIDATES = ("chromium", "chromium-browser", "google-chrome")
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--no-first-run", "--disable-sync",
         "--disable-default-apps", "--disable-extensions", "--mute-audio",
         # no way out: every host resolves to nothing and every proxy is a closed port
         "--host-resolver-rules=MAP * ~NOTFOUND", "--proxy-server=http://127.0.0.1:9",
         "--remote-debugging-pipe")
PATIENCE_S = 120.0          # a stuck browser fails the test instead of hanging it (not a timing check)


def find() -> Optional[str]:
    for name in CANDIDATES:
        path = shutil.which(name)
        if path:
            return path
    return None


@dataclass
class Visit:
    requests: List[str] = field(default_factory=list)     # every URL the page asked for
    blocked: List[str] = field(default_factory=list)      # of those, the ones refused
    errors: List[str] = field(default_factory=list)       # console errors, exceptions, error logs
    svgs: int = 0                                         # <svg> in figure.chart, drawn with a size
    charts_declared: int = -1                             # the page's own count (body data-charts)
    png: bytes = b""
    width: int = 0
    height: int = 0


def _high(fd: int) -> int:
    new = fcntl.fcntl(fd, fcntl.F_DUPFD_CLOEXEC, 10)
    os.close(fd)
    return new


class _Pipe:
    def __init__(self, exe: str, profile: Path):
        c_read, self.w = os.pipe()
        self.r, c_write = os.pipe()
        c_read, c_write = _high(c_read), _high(c_write)

        def plumb():                      # in the child, before exec: its fds 3 and 4
            os.dup2(c_read, 3)
            os.dup2(c_write, 4)

        self.proc = subprocess.Popen([exe, *FLAGS, f"--user-data-dir={profile}", "about:blank"],
                                     stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                                     stderr=subprocess.DEVNULL, preexec_fn=plumb, close_fds=False)
        os.close(c_read)
        os.close(c_write)
        self.buf = b""
        self.next_id = 0
        self.events: List[dict] = []

    def post(self, method: str, params: Optional[dict] = None, session: Optional[str] = None) -> int:
        """Send a command without waiting for its answer (one that waits on our reply to an event)."""
        self.next_id += 1
        msg = {"id": self.next_id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        os.write(self.w, json.dumps(msg).encode() + b"\0")
        return self.next_id

    def send(self, method: str, params: Optional[dict] = None, session: Optional[str] = None) -> dict:
        want = self.post(method, params, session)
        while True:
            m = self.read()
            if m.get("id") == want:
                if "error" in m:
                    raise RuntimeError(f"{method}: {m['error']}")
                return m.get("result", {})
            self.events.append(m)

    def read(self) -> dict:
        deadline = time.monotonic() + PATIENCE_S
        while b"\0" not in self.buf:
            left = deadline - time.monotonic()
            ready, _, _ = select.select([self.r], [], [], max(0.0, left))
            if not ready:
                raise TimeoutError("the browser said nothing")
            chunk = os.read(self.r, 1 << 20)
            if not chunk:
                raise EOFError("the browser closed its pipe")
            self.buf += chunk
        raw, self.buf = self.buf.split(b"\0", 1)
        return json.loads(raw)

    def wait_for(self, method: str) -> dict:
        for i, m in enumerate(self.events):
            if m.get("method") == method:
                return self.events.pop(i)
        while True:
            m = self.read()
            if m.get("method") == method:
                return m
            self.events.append(m)

    def close(self) -> None:
        try:
            self.send("Browser.close")
        except (OSError, RuntimeError, EOFError, TimeoutError):
            pass
        try:
            self.proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        for fd in (self.r, self.w):
            try:
                os.close(fd)
            except OSError:
                pass


def visit(exe: str, page: Path, profile: Path, width: int = 1200, height: int = 900) -> Visit:
    """Open ``page`` (a file) in headless Chromium; see :class:`Visit`."""
    url = page.absolute().as_uri()
    b = _Pipe(exe, profile)
    v = Visit()
    try:
        targets = b.send("Target.getTargets")["targetInfos"]
        target = next(t["targetId"] for t in targets if t["type"] == "page")
        s = b.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Page", "Runtime", "Log", "Network"):
            b.send(f"{domain}.enable", session=s)
        # every request but the page itself is paused, recorded and refused
        b.send("Fetch.enable", {"patterns": [{"urlPattern": "*"}]}, session=s)
        b.send("Emulation.setDeviceMetricsOverride",
               {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False}, session=s)
        b.post("Page.navigate", {"url": url}, session=s)     # answered once the page is let through
        while True:
            m = b.read() if not b.events else b.events.pop(0)
            method = m.get("method")
            p = m.get("params", {})
            if "id" in m and "error" in m:
                raise RuntimeError(f"the browser refused a command: {m['error']}")
            if method == "Fetch.requestPaused":
                asked = p["request"]["url"]
                if asked == url:
                    b.send("Fetch.continueRequest", {"requestId": p["requestId"]}, session=s)
                else:
                    v.blocked.append(asked)
                    b.send("Fetch.failRequest", {"requestId": p["requestId"],
                                                 "errorReason": "BlockedByClient"}, session=s)
            elif method == "Network.requestWillBeSent":
                v.requests.append(p["request"]["url"])
            elif method == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                v.errors.append(" ".join(str(a.get("value", a.get("description"))) for a in p.get("args", [])))
            elif method == "Runtime.exceptionThrown":
                v.errors.append(str(p.get("exceptionDetails", {}).get("text")))
            elif method == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                v.errors.append(str(p["entry"].get("text")))
            elif method == "Page.loadEventFired":
                break
        probe = ("JSON.stringify({svgs: Array.from(document.querySelectorAll('figure.chart > svg'))"
                 ".filter(e => {const r = e.getBoundingClientRect(); return r.width > 50 && r.height > 50;}).length,"
                 " declared: Number(document.body.dataset.charts)})")
        got = json.loads(b.send("Runtime.evaluate", {"expression": probe, "returnByValue": True},
                                session=s)["result"]["value"])
        v.svgs, v.charts_declared = got["svgs"], got["declared"]
        shot = b.send("Page.captureScreenshot", {"format": "png"}, session=s)
        v.png = base64.b64decode(shot["data"])
        # late messages (an error logged after load) are read before the verdict
        for m in b.events:
            if m.get("method") == "Log.entryAdded" and m["params"]["entry"].get("level") == "error":
                v.errors.append(str(m["params"]["entry"].get("text")))
            if m.get("method") == "Network.requestWillBeSent":
                v.requests.append(m["params"]["request"]["url"])
    finally:
        b.close()
    # PNG: 8-byte signature, then the IHDR chunk: length, type, width, height (big-endian)
    if v.png[:8] == b"\x89PNG\r\n\x1a\n" and v.png[12:16] == b"IHDR":
        v.width = int.from_bytes(v.png[16:20], "big")
        v.height = int.from_bytes(v.png[20:24], "big")
    return v
