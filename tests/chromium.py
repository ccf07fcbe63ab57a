"""A headless Chromium driven through its DevTools protocol over a pipe (standard library only).

Chromium started with ``--remote-debugging-pipe`` reads protocol commands from
file descriptor 3 and writes replies and events to descriptor 4, each message
JSON text ended by a NUL byte (Chrome DevTools Protocol, "remote debugging
pipe" transport). No WebDriver, no websocket library, no network port.

The page is loaded with the network switched off three ways: launch flags that
stop Chromium's own background traffic, a proxy that points nowhere, and the
protocol's offline emulation. Every console message, uncaught exception, log
entry and request is recorded, so a test can fail on any console error or on
any request that is not the page itself (or that fails).
"""

from __future__ import annotations

import base64
import json
import os
import select
import shutil
import subprocess
import tempfile
import time
from typing import Any

#: Launch flags (headless, no sandbox in containers, nothing fetched in the background).
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--disable-default-apps", "--disable-extensions", "--mute-audio",
         "--proxy-server=http://127.0.0.1:9", "--proxy-bypass-list=<-loopback>",
         "--remote-debugging-pipe")


def find_chromium() -> str | None:
    """The Chromium executable (``SIMWAVE_CHROMIUM``, else ``chromium`` on PATH), or None."""
    given = os.environ.get("SIMWAVE_CHROMIUM")
    if given:
        return given if os.path.exists(given) else None
    for name in ("chromium", "chromium-browser"):
        path = shutil.which(name)
        if path:
            return path
    return None


class BrowserError(RuntimeError):
    """The browser did not start, answer or load in time."""


class Chromium:
    """One headless Chromium with one page; use as a context manager."""

    def __init__(self, executable: str, width: int = 1280, height: int = 900,
                 timeout_s: float = 60.0) -> None:
        self.executable = executable
        self.size = (width, height)
        self.timeout_s = timeout_s
        self.events: list[dict[str, Any]] = []
        self._next = 0
        self._buf = b""
        self.session: str | None = None

    # ------------------------------------------------------------------ process
    def __enter__(self) -> Chromium:
        self.profile = tempfile.mkdtemp(prefix="simwave-chromium-")
        to_child_r, self._to_child = os.pipe()
        self._from_child, from_child_w = os.pipe()

        def wire() -> None:  # runs in the child before exec: the pipe ends become fds 3 and 4
            os.dup2(to_child_r, 3)
            os.dup2(from_child_w, 4)

        w, h = self.size
        self.proc = subprocess.Popen(
            [self.executable, *FLAGS, f"--user-data-dir={self.profile}",
             f"--window-size={w},{h}", "about:blank"],
            pass_fds=(3, 4), preexec_fn=wire, stdin=subprocess.DEVNULL,
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        os.close(to_child_r)
        os.close(from_child_w)
        try:
            targets = self.call("Target.getTargets")["targetInfos"]
            page = next((t for t in targets if t["type"] == "page"), None)
            target_id = (page["targetId"] if page else
                         self.call("Target.createTarget", url="about:blank")["targetId"])
            self.session = self.call("Target.attachToTarget", targetId=target_id,
                                     flatten=True)["sessionId"]
            for domain in ("Page", "Runtime", "Log", "Network"):
                self.call(f"{domain}.enable")
            self.call("Network.emulateNetworkConditions", offline=True, latency=0,
                      downloadThroughput=-1, uploadThroughput=-1)
            self.call("Emulation.setDeviceMetricsOverride", width=w, height=h,
                      deviceScaleFactor=1, mobile=False)
        except BaseException:
            self.__exit__(None, None, None)
            raise
        return self

    def __exit__(self, *exc: Any) -> None:
        try:
            if self.proc.poll() is None:
                self.proc.terminate()
                try:
                    self.proc.wait(10)
                except subprocess.TimeoutExpired:
                    self.proc.kill()
                    self.proc.wait()
        finally:
            for fd in (self._to_child, self._from_child):
                try:
                    os.close(fd)
                except OSError:
                    pass
            shutil.rmtree(self.profile, ignore_errors=True)

    # ------------------------------------------------------------------ protocol
    def _read_message(self, deadline: float) -> dict[str, Any]:
        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise BrowserError("Chromium did not answer in time")
            ready, _, _ = select.select([self._from_child], [], [], left)
            if ready:
                chunk = os.read(self._from_child, 1 << 20)
                if not chunk:
                    raise BrowserError(f"Chromium closed the pipe (exit code {self.proc.poll()})")
                self._buf += chunk
        text, self._buf = self._buf.split(b"\0", 1)
        return json.loads(text)

    def call(self, method: str, **params: Any) -> dict[str, Any]:
        """Send one command (to the page's session once attached) and wait for its reply."""
        self._next += 1
        msg: dict[str, Any] = {"id": self._next, "method": method, "params": params}
        if self.session and not method.startswith(("Target.", "Browser.")):
            msg["sessionId"] = self.session
        os.write(self._to_child, json.dumps(msg).encode() + b"\0")
        deadline = time.monotonic() + self.timeout_s
        while True:
            reply = self._read_message(deadline)
            if reply.get("id") == self._next:
                if "error" in reply:
                    raise BrowserError(f"{method}: {reply['error'].get('message')}")
                return reply.get("result") or {}
            if "method" in reply:
                self.events.append(reply)

    def wait_for(self, method: str, timeout_s: float | None = None) -> dict[str, Any]:
        """Wait for an event (returns it); events seen meanwhile are recorded."""
        for e in self.events:
            if e.get("method") == method:
                return e
        deadline = time.monotonic() + (timeout_s or self.timeout_s)
        while True:
            e = self._read_message(deadline)
            if "method" in e:
                self.events.append(e)
                if e["method"] == method:
                    return e

    # ------------------------------------------------------------------ page
    def open(self, url: str) -> None:
        """Load ``url`` and wait for its load event."""
        self.events.clear()
        result = self.call("Page.navigate", url=url)
        if result.get("errorText"):
            raise BrowserError(f"{url}: {result['errorText']}")
        self.wait_for("Page.loadEventFired")

    def evaluate(self, expression: str) -> Any:
        """The value of a JavaScript expression in the page (JSON-serialisable values)."""
        r = self.call("Runtime.evaluate", expression=expression, returnByValue=True,
                      awaitPromise=True)
        if r.get("exceptionDetails"):
            raise BrowserError(f"script failed: {r['exceptionDetails'].get('text')}")
        return (r.get("result") or {}).get("value")

    def click(self, selector: str) -> None:
        """A real mouse click (press and release) at the middle of the element."""
        box = self.evaluate(
            f"(function(){{var e=document.querySelector({json.dumps(selector)});"
            "e.scrollIntoView({block:'center'});var r=e.getBoundingClientRect();"
            "return [r.left+r.width/2, r.top+r.height/2];})()")
        x, y = box
        for kind in ("mousePressed", "mouseReleased"):
            self.call("Input.dispatchMouseEvent", type=kind, x=x, y=y, button="left",
                      clickCount=1)

    def press_enter_on(self, selector: str) -> None:
        """Focus an element and press Enter on the keyboard (keyboard use of a control)."""
        self.evaluate(f"document.querySelector({json.dumps(selector)}).focus()")
        for kind in ("keyDown", "keyUp"):
            self.call("Input.dispatchKeyEvent", type=kind, key="Enter", code="Enter",
                      windowsVirtualKeyCode=13, nativeVirtualKeyCode=13,
                      **({"text": "\r"} if kind == "keyDown" else {}))

    def screenshot(self, full_page: bool = False) -> bytes:
        """A PNG of the viewport (or of the whole page)."""
        r = self.call("Page.captureScreenshot", format="png", captureBeyondViewport=full_page)
        return base64.b64decode(r["data"])

    def print_pdf(self) -> bytes:
        """The page printed to PDF on A4 (print styles applied)."""
        r = self.call("Page.printToPDF", paperWidth=8.27, paperHeight=11.69,
                      preferCSSPageSize=True, printBackground=False)
        return base64.b64decode(r["data"])

    # ------------------------------------------------------------------ what happened
    def console_errors(self) -> list[str]:
        """Console errors, uncaught exceptions and error-level log entries."""
        out = []
        for e in self.events:
            m, p = e.get("method"), e.get("params") or {}
            if m == "Runtime.exceptionThrown":
                d = p.get("exceptionDetails") or {}
                out.append("exception: " + str((d.get("exception") or {}).get("description")
                                               or d.get("text")))
            elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                out.append("console: " + " ".join(str(a.get("value", a.get("description")))
                                                  for a in p.get("args") or []))
            elif m == "Log.entryAdded" and (p.get("entry") or {}).get("level") == "error":
                out.append("log: " + str(p["entry"].get("text")))
        return out

    def requests(self) -> list[str]:
        """URLs of every request the page made."""
        return [str(((e.get("params") or {}).get("request") or {}).get("url"))
                for e in self.events if e.get("method") == "Network.requestWillBeSent"]

    def failed_requests(self) -> list[str]:
        """Requests that failed (with their error text)."""
        by_id = {(e["params"] or {}).get("requestId"): ((e["params"] or {}).get("request") or {})
                 .get("url") for e in self.events if e.get("method") == "Network.requestWillBeSent"}
        return [f"{by_id.get(p.get('requestId'), '?')}: {p.get('errorText')}"
                for e in self.events if e.get("method") == "Network.loadingFailed"
                for p in [e.get("params") or {}]]
