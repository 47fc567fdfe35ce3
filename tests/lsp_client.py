"""A small JSON-RPC client for the language server, over the real process's pipes.

Messages are framed as the protocol frames them (``Content-Length`` headers);
a thread reads the server's output into a queue, so a test waits for a
response or a notification with a timeout instead of blocking forever.
Used by tests/test_lsp.py and tests/bench/bench_lsp.py.
"""

from __future__ import annotations

import json
import queue
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Callable, Optional

WAIT_S = 60.0      # a generous limit on one answer: the tests never measure time with it


class ServerGone(Exception):
    pass


class LspClient:
    def __init__(self, cwd: Optional[Path] = None):
        self.proc = subprocess.Popen([sys.executable, "-m", "portfolio", "lsp"], stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=cwd)
        self.inbox: "queue.Queue[Optional[dict]]" = queue.Queue()
        self.notifications: list = []
        self.next_id = 0
        self.stderr = b""
        threading.Thread(target=self._read, daemon=True).start()
        self._err = threading.Thread(target=self._read_stderr, daemon=True)
        self._err.start()

    def _read(self) -> None:
        out = self.proc.stdout
        while True:
            length = None
            while True:
                line = out.readline()
                if not line:
                    self.inbox.put(None)
                    return
                line = line.strip()
                if not line:
                    break
                name, _, value = line.partition(b":")
                if name.lower() == b"content-length":
                    length = int(value)
            if length is None:
                continue
            self.inbox.put(json.loads(out.read(length)))

    def _read_stderr(self) -> None:
        self.stderr = self.proc.stderr.read()

    def send_raw(self, body: bytes) -> None:
        self.proc.stdin.write(b"Content-Length: %d\r\n\r\n" % len(body) + body)
        self.proc.stdin.flush()

    def send(self, message: dict) -> None:
        self.send_raw(json.dumps({"jsonrpc": "2.0", **message}).encode("utf-8"))

    def notify(self, method: str, params) -> None:
        self.send({"method": method, "params": params})

    def _next(self, deadline: float) -> dict:
        try:
            msg = self.inbox.get(timeout=max(deadline - time.monotonic(), 0.01))
        except queue.Empty:
            raise TimeoutError("no message from the server") from None
        if msg is None:
            raise ServerGone("the server closed its output")
        return msg

    def request(self, method: str, params, wait: float = WAIT_S) -> dict:
        """Send a request; return its whole response (``result`` or ``error``)."""
        self.next_id += 1
        my_id = self.next_id
        self.send({"id": my_id, "method": method, "params": params})
        deadline = time.monotonic() + wait
        while True:
            msg = self._next(deadline)
            if msg.get("id") == my_id and "method" not in msg:
                return msg
            self._keep(msg)

    def _keep(self, msg: dict) -> None:
        if "method" in msg and "id" in msg:       # a request from the server: answer it with nothing
            self.send({"id": msg["id"], "result": None})
        elif "method" in msg:
            self.notifications.append(msg)

    def wait_for(self, method: str, test: Callable[[dict], bool] = lambda p: True, wait: float = WAIT_S) -> dict:
        """The first notification ``method`` whose params pass ``test`` (kept ones first)."""
        for i, msg in enumerate(self.notifications):
            if msg["method"] == method and test(msg["params"]):
                del self.notifications[i]
                return msg["params"]
        deadline = time.monotonic() + wait
        while True:
            msg = self._next(deadline)
            if msg.get("method") == method and "id" not in msg and test(msg["params"]):
                return msg["params"]
            self._keep(msg)

    def initialize(self, root: Path) -> dict:
        got = self.request("initialize", {"processId": None, "rootUri": root.as_uri(), "capabilities": {}})
        self.notify("initialized", {})
        return got["result"]

    def close(self, wait: float = 30.0) -> int:
        """shutdown, then exit; the server's exit code."""
        try:
            self.request("shutdown", None)
            self.notify("exit", None)
            self.proc.stdin.close()
        except (OSError, ServerGone, TimeoutError):
            pass
        try:
            code = self.proc.wait(timeout=wait)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            code = self.proc.wait()
        self._err.join(timeout=5)
        return code
