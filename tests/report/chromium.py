"""Open a local HTML file in headless Chromium and collect what a reader would meet.

Drives Debian's ``chromium`` through its DevTools protocol over a pipe
(``--remote-debugging-pipe``: commands on the browser's fd 3, replies and events on fd 4, each
message JSON ended by a NUL byte), so no driver library and no browser download are needed.
The protocol's method names are Chromium's own (Target, Page, Runtime, Log, Network,
Emulation); everything else here is ours.
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import select
import shutil
import struct
import subprocess
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

INSTALL_HINT = (
    "headless Chromium not found: install Debian's browser with "
    "'apt-get update && apt-get install -y chromium' (scripts/setup does this when CI is set)"
)
# Flags that keep the browser local and quiet on this project's machines (no sandbox as root,
# no GPU, no background or update traffic, a fresh profile per launch).
FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
    "--hide-scrollbars",
    "--remote-debugging-pipe",
)

# Facts gathered inside the page once it has loaded and every image has settled.
_FACTS_JS = """
(async () => {
  await Promise.all([...document.images].map(i => i.decode().catch(() => null)));
  const inPage = [...document.querySelectorAll('a[href]')].map(a => {
    const href = a.getAttribute('href');
    const local = href.startsWith('#');
    const id = local ? decodeURIComponent(href.slice(1)) : null;
    return {href, local, exists: local && id !== '' && document.getElementById(id) !== null};
  });
  const visible = (id) => {
    const el = document.getElementById(id);
    if (!el) return null;
    const r = el.getBoundingClientRect();
    const s = getComputedStyle(el);
    return {top: r.top, bottom: r.bottom, width: r.width, height: r.height,
            shown: s.display !== 'none' && s.visibility !== 'hidden' && s.opacity !== '0'};
  };
  return {
    images: [...document.images].map(i => ({
      alt: i.alt, scheme: i.src.split(':')[0], width: i.naturalWidth, height: i.naturalHeight,
      complete: i.complete})),
    links: inPage,
    viewport: {width: window.innerWidth, height: window.innerHeight},
    scrollHeight: document.documentElement.scrollHeight,
    probe: visible(PROBE_ID),
  };
})()
"""


@dataclass
class PageCheck:
    """What one page load showed: console errors, requests, in-page facts and a screenshot."""

    url: str
    console_errors: list[str] = field(default_factory=list)
    requests: list[str] = field(default_factory=list)
    facts: dict[str, Any] = field(default_factory=dict)
    screenshot: bytes = b""
    seconds: float = 0.0

    @property
    def outside_requests(self) -> list[str]:
        """Requested URLs other than the page itself and inline ``data:`` resources."""
        return [u for u in self.requests if u != self.url and not u.startswith("data:")]

    @property
    def screenshot_size(self) -> tuple[int, int]:
        """(width, height) in pixels, read from the PNG's IHDR chunk."""
        if self.screenshot[:8] != b"\x89PNG\r\n\x1a\n":
            return (0, 0)
        return struct.unpack(">II", self.screenshot[16:24])


def find_chromium() -> str | None:
    """Path of Debian's ``chromium`` (or ``$BENCHKIT_CHROMIUM``), else None."""
    explicit = os.environ.get("BENCHKIT_CHROMIUM")
    if explicit:
        return explicit if os.access(explicit, os.X_OK) else None
    return shutil.which("chromium") or shutil.which("chromium-browser")


class _Pipe:
    """One DevTools connection over the two pipes; calls are synchronous, events are kept."""

    def __init__(self, to_browser: int, from_browser: int, deadline: float) -> None:
        self.to_browser = to_browser
        self.from_browser = from_browser
        self.deadline = deadline
        self.buffer = b""
        self.events: list[dict] = []
        self.next_id = 0

    def _read_message(self) -> dict:
        while b"\0" not in self.buffer:
            left = self.deadline - time.monotonic()
            if left <= 0:
                raise TimeoutError("headless Chromium did not answer in time")
            ready, _, _ = select.select([self.from_browser], [], [], left)
            if ready:
                chunk = os.read(self.from_browser, 1 << 20)
                if not chunk:
                    raise ConnectionError("headless Chromium closed its DevTools pipe")
                self.buffer += chunk
        raw, self.buffer = self.buffer.split(b"\0", 1)
        message = json.loads(raw)
        if message.get("method") == "Fetch.requestPaused":
            self._gate(message)
        return message

    def _gate(self, paused: dict) -> None:
        """Let the page's own file and inline data through; fail anything else unsent."""
        params = paused["params"]
        local = params["request"]["url"].startswith(("file:", "data:"))
        if local:
            self.send("Fetch.continueRequest", {"requestId": params["requestId"]},
                      paused.get("sessionId"))
        else:
            self.send("Fetch.failRequest",
                      {"requestId": params["requestId"], "errorReason": "BlockedByClient"},
                      paused.get("sessionId"))

    def send(self, method: str, params: dict | None = None, session: str | None = None) -> int:
        self.next_id += 1
        message: dict[str, Any] = {"id": self.next_id, "method": method, "params": params or {}}
        if session:
            message["sessionId"] = session
        os.write(self.to_browser, json.dumps(message).encode() + b"\0")
        return self.next_id

    def call(self, method: str, params: dict | None = None, session: str | None = None) -> dict:
        wanted = self.send(method, params, session)
        while True:
            reply = self._read_message()
            if reply.get("id") == wanted:
                if "error" in reply:
                    raise RuntimeError(f"{method}: {reply['error']}")
                return reply.get("result", {})
            self.events.append(reply)

    def wait_for(self, method: str, session: str) -> dict:
        seen = 0
        while True:
            for event in self.events[seen:]:
                if event.get("method") == method and event.get("sessionId") == session:
                    return event
            seen = len(self.events)
            self.events.append(self._read_message())


def _console_errors(events: list[dict]) -> list[str]:
    errors = []
    for e in events:
        method, params = e.get("method"), e.get("params", {})
        if method == "Runtime.exceptionThrown":
            details = params.get("exceptionDetails", {})
            errors.append(f"exception: {details.get('text')} {details.get('exception', {})}")
        elif method == "Runtime.consoleAPICalled" and params.get("type") in ("error", "assert"):
            errors.append("console: " + " ".join(str(a.get("value")) for a in params["args"]))
        elif method == "Log.entryAdded" and params.get("entry", {}).get("level") == "error":
            entry = params["entry"]
            where = entry.get("url", "")
            errors.append(f"log ({entry.get('source')}): {entry.get('text')} {where}")
    return errors


def _above_nine(fd: int) -> int:
    """The same pipe end on a descriptor >= 10, clear of the 3 and 4 the browser expects."""
    high = fcntl.fcntl(fd, fcntl.F_DUPFD, 10)
    os.close(fd)
    return high


def inspect_page(
    page: Path, width: int = 1280, height: int = 800, probe_id: str = "decision-summary",
    timeout: float = 25.0, browser: str | None = None,
) -> PageCheck:
    """Load ``page`` at a ``width`` x ``height`` window and return what the browser saw.

    ``probe_id`` names an element whose box and visibility go into ``facts["probe"]`` (None
    when the page has no such element). The screenshot covers the full page height.
    """
    browser = browser or find_chromium()
    if browser is None:
        raise FileNotFoundError(INSTALL_HINT)
    started = time.monotonic()
    url = page.resolve().as_uri()
    to_read, to_browser = os.pipe()  # browser reads commands from fd 3
    from_browser, to_write = os.pipe()  # and writes replies to fd 4
    to_read, to_write = _above_nine(to_read), _above_nine(to_write)
    profile = tempfile.mkdtemp(prefix="benchkit-chromium-")
    args = [browser, *FLAGS, f"--user-data-dir={profile}", f"--window-size={width},{height}",
            "about:blank"]
    # bash places our pipe ends on fds 3 and 4, then becomes the browser.
    launcher = f'exec "$@" 3<&{to_read} 4>&{to_write} {to_read}<&- {to_write}>&-'
    proc = subprocess.Popen(
        ["/bin/bash", "-c", launcher, "sh", *args], pass_fds=(to_read, to_write),
        stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    os.close(to_read)
    os.close(to_write)
    check = PageCheck(url)
    try:
        cdp = _Pipe(to_browser, from_browser, started + timeout)
        target = cdp.call("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = cdp.call("Target.attachToTarget", {"targetId": target, "flatten": True})[
            "sessionId"
        ]
        for domain in ("Page", "Runtime", "Log", "Network"):
            cdp.call(f"{domain}.enable", {}, session)
        # Every request is held until we answer: only file: and data: go on (see _Pipe._gate),
        # so a page that reaches out is recorded in ``requests`` and nothing leaves the machine.
        cdp.call("Fetch.enable", {"patterns": [{"urlPattern": "*"}]}, session)
        cdp.call("Emulation.setDeviceMetricsOverride",
                 {"width": width, "height": height, "deviceScaleFactor": 1, "mobile": False},
                 session)
        cdp.call("Page.navigate", {"url": url}, session)
        cdp.wait_for("Page.loadEventFired", session)
        expression = _FACTS_JS.replace("PROBE_ID", json.dumps(probe_id))
        result = cdp.call("Runtime.evaluate",
                          {"expression": expression, "awaitPromise": True, "returnByValue": True},
                          session)
        if "exceptionDetails" in result:
            raise RuntimeError(f"page facts script failed: {result['exceptionDetails']}")
        check.facts = result["result"]["value"]
        size = cdp.call("Page.getLayoutMetrics", {}, session)["cssContentSize"]
        shot = cdp.call("Page.captureScreenshot", {
            "format": "png", "captureBeyondViewport": True,
            "clip": {"x": 0, "y": 0, "width": size["width"], "height": size["height"],
                     "scale": 1},
        }, session)
        check.screenshot = base64.b64decode(shot["data"])
        check.facts["content_size"] = size
        check.console_errors = _console_errors(cdp.events)
        check.requests = [e["params"]["request"]["url"] for e in cdp.events
                          if e.get("method") == "Network.requestWillBeSent"]
        try:
            cdp.call("Browser.close")
        except (ConnectionError, RuntimeError):
            pass
    finally:
        os.close(to_browser)
        os.close(from_browser)
        try:
            proc.wait(timeout=5)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        shutil.rmtree(profile, ignore_errors=True)
    check.seconds = time.monotonic() - started
    return check
