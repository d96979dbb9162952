"""A headless Chromium driven over its DevTools pipe, for checking what a reader sees in a page.

Chromium (the Debian package) is started with ``--remote-debugging-pipe``:
it reads DevTools commands (JSON, each ended by a NUL byte) on file
descriptor 3 and answers on 4. Only the standard library is needed.
"""

from __future__ import annotations

import fcntl
import json
import os
import shutil
import subprocess
import time
from pathlib import Path

FLAGS = (
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
)


def chromium() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser")


class Browser:
    def __init__(self, profile: Path):
        to_browser, from_browser = os.pipe(), os.pipe()
        # move the browser's ends above 4 so that placing them on 3 and 4 cannot clobber each other
        read3 = fcntl.fcntl(to_browser[0], fcntl.F_DUPFD, 10)
        write4 = fcntl.fcntl(from_browser[1], fcntl.F_DUPFD, 10)

        def place() -> None:
            os.dup2(read3, 3)
            os.dup2(write4, 4)

        self.proc = subprocess.Popen(
            [chromium(), *FLAGS, f"--user-data-dir={profile}", "--remote-debugging-pipe", "about:blank"],
            pass_fds=(3, 4), preexec_fn=place, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        )
        for fd in (to_browser[0], from_browser[1], read3, write4):
            os.close(fd)
        self.send_fd, self.recv_fd = to_browser[1], from_browser[0]
        self.next_id = 0
        self.buffer = b""
        self.session = None

    def call(self, method: str, params: dict | None = None, *, session: bool = True, timeout: float = 60) -> dict:
        self.next_id += 1
        message = {"id": self.next_id, "method": method, "params": params or {}}
        if session and self.session:
            message["sessionId"] = self.session
        os.write(self.send_fd, json.dumps(message).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            while b"\0" in self.buffer:
                raw, self.buffer = self.buffer.split(b"\0", 1)
                reply = json.loads(raw)
                if reply.get("id") == self.next_id:
                    if "error" in reply:
                        raise RuntimeError(f"{method}: {reply['error']}")
                    return reply["result"]
            chunk = os.read(self.recv_fd, 1 << 20)
            if not chunk:
                raise RuntimeError("the browser closed its pipe")
            self.buffer += chunk
        raise TimeoutError(method)

    def open(self, url: str) -> None:
        target = self.call("Target.createTarget", {"url": url}, session=False)["targetId"]
        self.session = self.call("Target.attachToTarget", {"targetId": target, "flatten": True}, session=False)["sessionId"]
        self.wait_for(f"document.readyState === 'complete' && location.href === {json.dumps(url)}")

    def evaluate(self, expression: str):
        result = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True, "awaitPromise": True})
        if "exceptionDetails" in result:
            raise RuntimeError(f"{expression}: {result['exceptionDetails']}")
        return result["result"].get("value")

    def wait_for(self, condition: str, timeout: float = 30):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            value = self.evaluate(f"(() => {{ try {{ return {condition}; }} catch (e) {{ return null; }} }})()")
            if value:
                return value
            time.sleep(0.1)
        raise TimeoutError(condition)

    def close(self) -> None:
        try:
            self.call("Browser.close", session=False, timeout=10)
        except (RuntimeError, TimeoutError, OSError):
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
        os.close(self.send_fd)
        os.close(self.recv_fd)
