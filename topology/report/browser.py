"""A headless Chromium session on a local page, driven by the DevTools protocol over a pipe (no
network port, no extra package): load a page at a window width, evaluate expressions, collect
console errors, take a full-page screenshot. The one module that runs a browser.

The run uses it for ``page.png`` beside the report (:func:`screenshot`); without Chromium that
is skipped. Protocol: JSON messages ending in a NUL byte, commands on the browser's file
descriptor 3, replies and events on its descriptor 4 (``--remote-debugging-pipe``, Chrome
DevTools Protocol documentation).
"""

from __future__ import annotations

import base64
import json
import os
import shutil
import subprocess
import time
from pathlib import Path

BROWSERS = ("chromium", "chromium-browser", "google-chrome")  # program names looked up on PATH
FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--disable-extensions", "--hide-scrollbars",
         "--mute-audio", "--remote-debugging-pipe")


def find_browser() -> str | None:
    """The path of a Chromium-family browser on PATH, or None."""
    return next((p for p in map(shutil.which, BROWSERS) if p), None)


class BrowserError(RuntimeError):
    """The browser failed to start, to answer in time, or to load the page."""


class Page:
    """``with Page(url, width=1280) as page:`` a loaded page; :meth:`evaluate`, :meth:`screenshot`,
    :attr:`console_errors` (console.error calls, uncaught exceptions, failed loads)."""

    def __init__(self, url: str, *, width: int = 1280, height: int = 900, timeout: float = 60.0,
                 browser: str | None = None, profile: str | Path | None = None):
        self.url, self.width, self.height, self.timeout = url, width, height, timeout
        self.browser = browser or find_browser()
        if self.browser is None:
            raise BrowserError("no Chromium on PATH")
        self.profile = profile
        self.console_errors: list[str] = []
        self._id, self._buf, self._events = 0, b"", []

    # -- the pipe -------------------------------------------------------------------------------
    def __enter__(self):
        import tempfile

        self._tmp = None
        if self.profile is None:
            self._tmp = tempfile.TemporaryDirectory(prefix="topology-browser-")
            self.profile = self._tmp.name
        to_browser_r, self._to_browser = os.pipe()
        self._from_browser, from_browser_w = os.pipe()
        def child_fds():  # in the child, before exec: the pipe ends become descriptors 3 and 4
            import fcntl

            # first copies at 10 or above, so that neither lands on 3 or 4 (a dup2 onto itself
            # would keep close-on-exec), then onto 3 and 4, open across exec
            read_end = fcntl.fcntl(to_browser_r, fcntl.F_DUPFD, 10)
            write_end = fcntl.fcntl(from_browser_w, fcntl.F_DUPFD, 10)
            os.dup2(read_end, 3)
            os.dup2(write_end, 4)
            os.set_inheritable(3, True)
            os.set_inheritable(4, True)

        try:
            self._log = open(Path(self.profile) / "browser.log", "w+b")
            self._proc = subprocess.Popen([self.browser, *FLAGS, f"--user-data-dir={self.profile}",
                                           f"--window-size={self.width},{self.height}", "about:blank"],
                                          stdin=subprocess.DEVNULL, stdout=self._log,
                                          stderr=self._log, preexec_fn=child_fds, close_fds=False)
        except OSError as e:
            for fd in (to_browser_r, self._to_browser, self._from_browser, from_browser_w):
                os.close(fd)
            raise BrowserError(f"cannot start {self.browser}: {e}") from None
        os.close(to_browser_r)
        os.close(from_browser_w)
        try:
            self._open()
        except BaseException:
            self.__exit__(None, None, None)
            raise
        return self

    def __exit__(self, *exc):
        try:
            self._send("Browser.close", session=False, wait=False)
        except (BrowserError, OSError):
            pass
        try:
            self._proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self._proc.kill()
            self._proc.wait()
        for fd in (self._to_browser, self._from_browser):
            try:
                os.close(fd)
            except OSError:
                pass
        self._log.close()
        if self._tmp is not None:
            self._tmp.cleanup()

    def _last_words(self) -> str:
        """The last line of the browser's own log (its exit status when it wrote none)."""
        try:
            self._log.seek(0)
            lines = [ln for ln in self._log.read().decode(errors="replace").splitlines() if ln.strip()]
        except (OSError, ValueError):
            lines = []
        return lines[-1].strip()[:300] if lines else f"exit status {self._proc.poll()}"

    def _read_message(self, deadline: float) -> dict:
        import select

        while b"\0" not in self._buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise BrowserError(f"no answer from the browser within {self.timeout:g} s")
            ready, _, _ = select.select([self._from_browser], [], [], left)
            if ready:
                chunk = os.read(self._from_browser, 1 << 20)
                if not chunk:
                    raise BrowserError(f"the browser closed its pipe ({self._last_words()})")
                self._buf += chunk
        raw, self._buf = self._buf.split(b"\0", 1)
        return json.loads(raw)

    def _send(self, method: str, params: dict | None = None, *, session: bool = True, wait: bool = True) -> dict:
        self._id += 1
        msg = {"id": self._id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = self._session
        try:
            os.write(self._to_browser, json.dumps(msg).encode() + b"\0")
        except BrokenPipeError:
            raise BrowserError(f"the browser stopped ({self._last_words()})") from None
        if not wait:
            return {}
        deadline = time.monotonic() + self.timeout
        while True:
            reply = self._read_message(deadline)
            if reply.get("id") == self._id:
                if "error" in reply:
                    raise BrowserError(f"{method}: {reply['error'].get('message')}")
                return reply.get("result", {})
            self._event(reply)

    def _event(self, msg: dict) -> None:
        method, params = msg.get("method"), msg.get("params", {})
        if method == "Runtime.consoleAPICalled" and params.get("type") in ("error", "assert"):
            self.console_errors.append(" ".join(str(a.get("value", a.get("description", ""))) for a in params["args"]))
        elif method == "Runtime.exceptionThrown":
            d = params.get("exceptionDetails", {})
            self.console_errors.append(d.get("exception", {}).get("description") or d.get("text", "exception"))
        elif method == "Log.entryAdded" and params.get("entry", {}).get("level") == "error":
            self.console_errors.append(params["entry"].get("text", ""))
        self._events.append(method)

    def _wait_event(self, name: str) -> None:
        deadline = time.monotonic() + self.timeout
        while name not in self._events:
            self._event(self._read_message(deadline))

    def _open(self) -> None:
        target = self._send("Target.createTarget", {"url": "about:blank"}, session=False)["targetId"]
        self._session = self._send("Target.attachToTarget", {"targetId": target, "flatten": True},
                                   session=False)["sessionId"]
        for domain in ("Page", "Runtime", "Log"):
            self._send(f"{domain}.enable")
        self._send("Emulation.setDeviceMetricsOverride", {"width": self.width, "height": self.height,
                                                          "deviceScaleFactor": 1, "mobile": False})
        self._events.clear()
        nav = self._send("Page.navigate", {"url": self.url})
        if nav.get("errorText"):
            raise BrowserError(f"cannot load {self.url}: {nav['errorText']}")
        self._wait_event("Page.loadEventFired")

    # -- what a caller uses -----------------------------------------------------------------------
    def evaluate(self, expression: str):
        """The JSON value of a JavaScript expression in the page."""
        res = self._send("Runtime.evaluate", {"expression": expression, "returnByValue": True})
        if "exceptionDetails" in res:
            raise BrowserError(f"{expression}: {res['exceptionDetails'].get('text')}")
        return res["result"].get("value")

    def screenshot(self, path: str | Path) -> tuple[int, int]:
        """A PNG of the whole page at the window width; returns its (width, height) in pixels."""
        height = int(self.evaluate("Math.ceil(document.documentElement.scrollHeight)"))
        width = int(self.evaluate("Math.ceil(document.documentElement.scrollWidth)"))
        shot = self._send("Page.captureScreenshot", {"format": "png", "captureBeyondViewport": True,
                                                     "clip": {"x": 0, "y": 0, "width": width, "height": height,
                                                              "scale": 1}})
        Path(path).write_bytes(base64.b64decode(shot["data"]))
        return width, height


def screenshot(html: Path, png: Path, width: int = 1280) -> str | None:
    """``png``: the whole page ``html`` as seen in a ``width`` px window. Returns None when done or
    when no browser is installed (nothing written), else why it failed (for a note)."""
    if find_browser() is None:
        return None
    try:
        with Page(Path(html).resolve().as_uri(), width=width) as page:
            page.screenshot(png)
    except (BrowserError, OSError, ValueError) as e:
        return f"no screenshot of the report page: {e}"
    return None
