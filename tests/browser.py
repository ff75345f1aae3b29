"""Load a local HTML file in headless Chromium and report what a reader would see.

Talks to the browser over the DevTools protocol through a pipe
(``--remote-debugging-pipe``: JSON messages ended by a NUL byte on file
descriptors 3 and 4), so nothing listens on any network port. Collects the
natural size of every image, console errors, uncaught exceptions and failed
loads, and saves a full-page screenshot.
"""
from __future__ import annotations

import base64
import fcntl
import json
import os
import select
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

BROWSERS = ("chromium", "chromium-browser", "google-chrome", "chrome")
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-extensions", "--mute-audio", "--hide-scrollbars", "--remote-debugging-pipe")


def find_browser() -> str | None:
    """Path of a Chromium-family browser, or None."""
    for name in BROWSERS:
        path = shutil.which(name)
        if path:
            return path
    return None


class Pipe:
    """A DevTools session over the browser's pipe."""

    def __init__(self, browser: str, profile: str):
        to_browser_r, self.to_browser = os.pipe()
        self.from_browser, from_browser_w = os.pipe()
        # Chromium reads commands on fd 3 and writes replies on fd 4.
        def onto_3_and_4():
            high = [fcntl.fcntl(fd, fcntl.F_DUPFD, 10) for fd in (to_browser_r, from_browser_w)]
            os.dup2(high[0], 3)
            os.dup2(high[1], 4)

        self.proc = subprocess.Popen(
            [browser, *FLAGS, f"--user-data-dir={profile}", "--window-size=1280,900", "about:blank"],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            close_fds=False, preexec_fn=onto_3_and_4)
        os.close(to_browser_r)
        os.close(from_browser_w)
        self.buffer = b""
        self.next_id = 0
        self.events: list[dict] = []

    def send(self, method: str, params: dict | None = None, session: str | None = None, timeout: float = 30.0):
        self.next_id += 1
        message = {"id": self.next_id, "method": method, "params": params or {}}
        if session:
            message["sessionId"] = session
        os.write(self.to_browser, json.dumps(message).encode() + b"\0")
        deadline = time.monotonic() + timeout
        while True:
            reply = self._read(deadline)
            if reply.get("id") == self.next_id:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_for(self, method: str, timeout: float = 30.0) -> dict:
        for i, event in enumerate(self.events):
            if event.get("method") == method:
                return self.events.pop(i)
        deadline = time.monotonic() + timeout
        while True:
            event = self._read(deadline)
            if event.get("method") == method:
                return event
            self.events.append(event)

    def _read(self, deadline: float) -> dict:
        while b"\0" not in self.buffer:
            left = deadline - time.monotonic()
            if left <= 0 or not select.select([self.from_browser], [], [], left)[0]:
                raise TimeoutError("the browser did not answer in time")
            chunk = os.read(self.from_browser, 1 << 20)
            if not chunk:
                raise RuntimeError("the browser closed its pipe")
            self.buffer += chunk
        message, self.buffer = self.buffer.split(b"\0", 1)
        return json.loads(message)

    def close(self) -> None:
        try:
            os.write(self.to_browser, json.dumps({"id": 0, "method": "Browser.close"}).encode() + b"\0")
            self.proc.wait(timeout=10)
        except (OSError, subprocess.TimeoutExpired):
            self.proc.kill()
            self.proc.wait()
        os.close(self.to_browser)
        os.close(self.from_browser)


STARTUP_SECONDS = 180.0  # s the browser may take to answer its first command

IMAGES = "JSON.stringify(Array.from(document.images).map(i => [i.getAttribute('src'), i.naturalWidth, i.naturalHeight, i.complete]))"


class Browser:
    """One headless Chromium for several pages; use as a context manager."""

    def __init__(self, path: str):
        self.profile = tempfile.mkdtemp(prefix="brace-browser-")
        self.pipe = Pipe(path, self.profile)
        # A first start with a fresh profile on a busy machine can take well over 30 s:
        # wait for the browser's first answer once, generously, before any page is timed.
        self.pipe.send("Browser.getVersion", timeout=STARTUP_SECONDS)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.pipe.close()
        shutil.rmtree(self.profile, ignore_errors=True)

    def load(self, page: Path, screenshot: Path) -> dict:
        """Open ``page`` (a local file) in a new tab, wait for it to load, and say what happened.

        Returns ``{"images": [[src, width, height, complete], ...], "errors": [text, ...],
        "title": str}`` and writes a full-page PNG screenshot to ``screenshot``.
        """
        pipe = self.pipe
        pipe.events.clear()
        target = pipe.send("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = pipe.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Page", "Runtime", "Log", "Network"):
            pipe.send(f"{domain}.enable", session=session)
        pipe.send("Page.navigate", {"url": page.resolve().as_uri()}, session=session)
        pipe.wait_for("Page.loadEventFired", timeout=60)
        time.sleep(0.3)  # let late console messages arrive
        images = json.loads(pipe.send("Runtime.evaluate", {"expression": IMAGES, "returnByValue": True},
                                      session=session)["result"]["value"])
        title = pipe.send("Runtime.evaluate", {"expression": "document.title", "returnByValue": True},
                          session=session)["result"]["value"]
        shot = pipe.send("Page.captureScreenshot", {"format": "png", "captureBeyondViewport": True},
                         session=session, timeout=60)
        screenshot.write_bytes(base64.b64decode(shot["data"]))
        pipe.send("Runtime.evaluate", {"expression": "1"}, session=session)  # flush pending events
        errors = _errors(pipe.events)
        pipe.send("Target.closeTarget", {"targetId": target})
        return {"images": images, "errors": errors, "title": title}


def load_page(browser: str, page: Path, screenshot: Path) -> dict:
    """Load one page in a fresh browser (see :meth:`Browser.load`)."""
    with Browser(browser) as session:
        return session.load(page, screenshot)


def _errors(events: list[dict]) -> list[str]:
    out = []
    for event in events:
        method, params = event.get("method"), event.get("params", {})
        if method == "Runtime.consoleAPICalled" and params.get("type") in ("error", "assert"):
            out.append("console: " + " ".join(str(a.get("value", a.get("description", ""))) for a in params["args"]))
        elif method == "Runtime.exceptionThrown":
            out.append("exception: " + params["exceptionDetails"].get("text", ""))
        elif method == "Log.entryAdded" and params["entry"].get("level") == "error":
            out.append("log: " + params["entry"].get("text", "") + " " + params["entry"].get("url", ""))
        elif method == "Network.loadingFailed":
            out.append("load failed: " + params.get("errorText", ""))
    return out
