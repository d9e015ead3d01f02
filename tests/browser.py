"""Open a page in headless Chromium and report what a reader's browser would see.

A small client of the Chrome DevTools Protocol over a pipe: Chromium started with
``--remote-debugging-pipe`` reads commands on file descriptor 3 and writes replies and
events on descriptor 4, each a JSON text ended by a NUL byte (the transport Puppeteer and
Playwright use). So no websocket library, no network port and no browser download are
needed; only a Chromium from the system's packages.

Every host name fails to resolve and all traffic goes to a closed local proxy port, so
a page that tries to reach the network shows it in ``requests`` and cannot leave the
machine.
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import select
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

FLAGS = (
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-extensions",
    "--disable-default-apps", "--mute-audio", "--hide-scrollbars", "--disable-dev-shm-usage",
    "--host-resolver-rules=MAP * ~NOTFOUND", "--proxy-server=127.0.0.1:9",
    "--remote-debugging-pipe",
)


@dataclass
class PageVisit:
    """What happened while a page loaded."""

    errors: list[str] = field(default_factory=list)
    requests: list[str] = field(default_factory=list)
    images: list[tuple[bool, int]] = field(default_factory=list)
    sections: list[str] = field(default_factory=list)
    screenshot: bytes = b""

    @property
    def external_requests(self) -> list[str]:
        """Requests for anything but the page's own file and data URIs."""
        return [u for u in self.requests if not u.startswith(("file:", "data:"))]


class DevTools:
    """One headless Chromium driven over the DevTools pipe."""

    def __init__(self, chromium: str, timeout: float = 60.0) -> None:
        self.timeout = timeout
        self._profile = tempfile.TemporaryDirectory(prefix="octrial-test-chromium-")
        commands_r, self._commands_w = os.pipe()
        self._events_r, events_w = os.pipe()
        # Above 9 so that placing them on 3 and 4 in the child cannot clobber each other.
        high_r = fcntl.fcntl(commands_r, fcntl.F_DUPFD, 10)
        high_w = fcntl.fcntl(events_w, fcntl.F_DUPFD, 10)
        os.close(commands_r)
        os.close(events_w)

        def place_pipes() -> None:
            os.dup2(high_r, 3)
            os.dup2(high_w, 4)

        self._process = subprocess.Popen(
            [chromium, *FLAGS, f"--user-data-dir={self._profile.name}", "about:blank"],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            preexec_fn=place_pipes, pass_fds=(3, 4))
        os.close(high_r)
        os.close(high_w)
        self._buffer = b""
        self._next_id = 0
        self.events: list[dict[str, Any]] = []

    def __enter__(self) -> DevTools:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Ask the browser to quit; end it if it does not."""
        try:
            if self._process.poll() is None:
                self._write({"id": -1, "method": "Browser.close"})
            self._process.wait(timeout=10)
        except (OSError, subprocess.TimeoutExpired):
            self._process.kill()
            self._process.wait()
        finally:
            for fd in (self._commands_w, self._events_r):
                try:
                    os.close(fd)
                except OSError:
                    pass
            self._profile.cleanup()

    def _write(self, message: dict[str, Any]) -> None:
        os.write(self._commands_w, json.dumps(message).encode() + b"\0")

    def _read(self, deadline: float) -> dict[str, Any]:
        while b"\0" not in self._buffer:
            left = deadline - time.monotonic()
            if left <= 0 or not select.select([self._events_r], [], [], left)[0]:
                raise TimeoutError("no message from Chromium in time")
            chunk = os.read(self._events_r, 1 << 16)
            if not chunk:
                raise ConnectionError("Chromium closed the DevTools pipe")
            self._buffer += chunk
        message, self._buffer = self._buffer.split(b"\0", 1)
        return json.loads(message)

    def send(self, method: str, params: dict[str, Any] | None = None,
             session: str | None = None) -> dict[str, Any]:
        """Send a command and wait for its reply, keeping the events seen meanwhile."""
        self._next_id += 1
        message: dict[str, Any] = {"id": self._next_id, "method": method,
                                   "params": params or {}}
        if session:
            message["sessionId"] = session
        self._write(message)
        deadline = time.monotonic() + self.timeout
        while True:
            reply = self._read(deadline)
            if reply.get("id") == self._next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            if "method" in reply:
                self.events.append(reply)

    def wait_for(self, event: str, session: str) -> dict[str, Any]:
        """Wait for an event of the page."""
        deadline = time.monotonic() + self.timeout
        for seen in self.events:
            if seen["method"] == event and seen.get("sessionId") == session:
                return seen
        while True:
            message = self._read(deadline)
            if "method" in message:
                self.events.append(message)
                if message["method"] == event and message.get("sessionId") == session:
                    return message

    def visit(self, path: Path, width: int = 1100, height: int = 1400) -> PageVisit:
        """Load the file ``path`` and collect errors, requests, images and a screenshot."""
        target = self.send("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = self.send("Target.attachToTarget", {"targetId": target,
                                                      "flatten": True})["sessionId"]
        for domain in ("Page", "Runtime", "Log", "Network"):
            self.send(f"{domain}.enable", session=session)
        self.send("Emulation.setDeviceMetricsOverride", {
            "width": width, "height": height, "deviceScaleFactor": 1, "mobile": False},
            session=session)
        self.send("Page.navigate", {"url": Path(path).resolve().as_uri()}, session=session)
        self.wait_for("Page.loadEventFired", session)
        probe = ("JSON.stringify({images: Array.from(document.images).map("
                 "i => [i.complete, i.naturalWidth]), sections: Array.from("
                 "document.querySelectorAll('main > section')).map(s => s.id)})")
        found = json.loads(self.send("Runtime.evaluate", {"expression": probe,
                                                          "returnByValue": True},
                                     session=session)["result"]["value"])
        shot = self.send("Page.captureScreenshot", {"format": "png"}, session=session)
        visit = PageVisit(images=[tuple(i) for i in found["images"]],
                          sections=found["sections"],
                          screenshot=base64.b64decode(shot["data"]))
        for event in self.events:
            if event.get("sessionId") != session:
                continue
            method, params = event["method"], event.get("params", {})
            if method == "Runtime.exceptionThrown":
                visit.errors.append(params["exceptionDetails"].get("text", "exception"))
            elif method == "Runtime.consoleAPICalled" and params["type"] in ("error",
                                                                             "assert"):
                visit.errors.append(" ".join(str(a.get("value", "")) for a in params["args"]))
            elif method == "Log.entryAdded" and params["entry"]["level"] == "error":
                visit.errors.append(params["entry"]["text"])
            elif method == "Network.requestWillBeSent":
                visit.requests.append(params["request"]["url"])
        return visit
