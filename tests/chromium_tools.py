"""Open a page in headless Chromium from tests: console errors and a screenshot.

A small client of the browser's DevTools protocol over ``--remote-debugging-pipe``
(JSON messages separated by NUL bytes on file descriptors 3 and 4), so it needs no
package beyond the standard library. It collects what the browser's console would
show as errors — ``Runtime.consoleAPICalled`` of type error or assert,
``Runtime.exceptionThrown``, and ``Log.entryAdded`` at level error (failed or blocked
loads, policy violations) — and saves a screenshot of the whole page.

Chromium is Debian's ``chromium`` package. The flags that stop its background
connections are needed on machines whose network is closed: without them the
browser's own connection attempts are refused and logged. Set ``KINSET_CHROMIUM``
to use another executable.
"""

from __future__ import annotations

import base64
import fcntl
import json
import os
import select
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field

import pytest

CHROMIUM_ENV = "KINSET_CHROMIUM"

FLAGS = ("--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--hide-scrollbars", "--remote-debugging-pipe")


def find_chromium() -> str | None:
    override = os.environ.get(CHROMIUM_ENV)
    if override:
        return shutil.which(override)
    return shutil.which("chromium") or shutil.which("chromium-browser")


requires_chromium = pytest.mark.skipif(
    find_chromium() is None,
    reason="headless Chromium is not installed (Debian: apt-get install -y chromium)")


class BrowserError(RuntimeError):
    pass


@dataclass
class PageResult:
    errors: list[str] = field(default_factory=list)
    screenshot: bytes = b""
    title: str = ""
    height: int = 0
    value: object = None     # the result of ``expression``, if one was given


class _Pipe:
    def __init__(self, write_fd: int, read_fd: int):
        self.w, self.r = write_fd, read_fd
        self.buf = b""
        self.next_id = 0
        self.events: list[dict] = []

    def send(self, method: str, params: dict | None = None, session: str | None = None) -> int:
        self.next_id += 1
        msg = {"id": self.next_id, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        data = json.dumps(msg).encode() + b"\0"
        while data:
            data = data[os.write(self.w, data):]
        return self.next_id

    def receive(self, deadline: float) -> dict:
        while b"\0" not in self.buf:
            left = deadline - time.monotonic()
            if left <= 0:
                raise BrowserError("no answer from the browser in time")
            ready, _, _ = select.select([self.r], [], [], left)
            if ready:
                chunk = os.read(self.r, 1 << 20)
                if not chunk:
                    raise BrowserError("the browser closed its pipe")
                self.buf += chunk
        msg, _, self.buf = self.buf.partition(b"\0")
        return json.loads(msg)

    def call(self, method, params=None, session=None, timeout=30.0) -> dict:
        i = self.send(method, params, session)
        deadline = time.monotonic() + timeout
        while True:
            m = self.receive(deadline)
            if m.get("id") == i:
                if "error" in m:
                    raise BrowserError(f"{method}: {m['error']}")
                return m.get("result", {})
            self.events.append(m)

    def wait_for(self, method: str, timeout: float = 30.0) -> None:
        deadline = time.monotonic() + timeout
        while not any(e.get("method") == method for e in self.events):
            self.events.append(self.receive(deadline))


def _errors(events: list[dict]) -> list[str]:
    out = []
    for ev in events:
        m, p = ev.get("method"), ev.get("params", {})
        if m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
            out.append("console: " + " ".join(str(a.get("value", a.get("description", "")))
                                             for a in p.get("args", [])))
        elif m == "Runtime.exceptionThrown":
            out.append("exception: " + json.dumps(p.get("exceptionDetails", {}))[:500])
        elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
            e = p["entry"]
            out.append(f"log ({e.get('source')}): {e.get('text')} {e.get('url', '')}")
    return out


def open_page(url: str, width: int = 1280, height: int = 900, timeout: float = 40.0,
              shot_height: int = 3000, expression: str | None = None,
              media: str | None = None) -> PageResult:
    """Load ``url`` in headless Chromium; return its console errors and a PNG of the top
    ``shot_height`` pixels of the page (or all of it, if shorter), and the value of a
    JavaScript ``expression`` evaluated by the browser on the loaded page (layout
    questions: where an element is). ``media="print"`` lays the page out with its print
    style sheet (CSS media emulation), as it would be printed at ``width`` pixels."""
    exe = find_chromium()
    if exe is None:
        raise BrowserError("chromium not found")
    to_child_r, to_child_w = os.pipe()
    from_child_r, from_child_w = os.pipe()
    # The child's ends move above 9 first, so that putting them on 3 and 4 below never
    # overwrites one with the other (under pytest the pipes may land on 3 or 4 themselves).
    high = [fcntl.fcntl(fd, fcntl.F_DUPFD, 10) for fd in (to_child_r, from_child_w)]
    os.close(to_child_r)
    os.close(from_child_w)
    to_child_r, from_child_w = high
    profile = tempfile.mkdtemp(prefix="kinset-chromium-")
    args = [exe, *FLAGS, f"--user-data-dir={profile}", f"--window-size={width},{height}",
            "about:blank"]
    # The browser reads commands on fd 3 and answers on fd 4: a small launcher puts the
    # pipe ends there and then becomes the browser (no shell: dash takes only fds 0-9).
    launcher = ("import os, sys; os.dup2(int(sys.argv[1]), 3); os.dup2(int(sys.argv[2]), 4); "
                "os.execv(sys.argv[3], sys.argv[3:])")
    proc = subprocess.Popen([sys.executable, "-c", launcher, str(to_child_r), str(from_child_w),
                             *args], pass_fds=(to_child_r, from_child_w),
                            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                            stderr=open(os.environ.get("KINSET_CHROMIUM_LOG", os.devnull), "wb"))
    os.close(to_child_r)
    os.close(from_child_w)
    pipe = _Pipe(to_child_w, from_child_r)
    try:
        target = pipe.call("Target.createTarget", {"url": "about:blank"}, timeout=timeout)
        session = pipe.call("Target.attachToTarget", {"targetId": target["targetId"],
                                                      "flatten": True})["sessionId"]
        for domain in ("Runtime.enable", "Log.enable", "Page.enable"):
            pipe.call(domain, session=session)
        if media is not None:
            pipe.call("Emulation.setEmulatedMedia", {"media": media}, session=session)
        pipe.call("Page.navigate", {"url": url}, session=session)
        pipe.wait_for("Page.loadEventFired", timeout)
        metrics = pipe.call("Page.getLayoutMetrics", session=session)
        size = metrics.get("cssContentSize") or metrics.get("contentSize") or {}
        full_height = int(size.get("height", height))
        shot = pipe.call("Page.captureScreenshot", {"format": "png", "captureBeyondViewport": True,
                                                     "clip": {"x": 0, "y": 0, "width": width,
                                                              "height": min(full_height, shot_height),
                                                              "scale": 1}},
                         session=session, timeout=timeout)
        title = pipe.call("Runtime.evaluate", {"expression": "document.title",
                                               "returnByValue": True}, session=session)
        value = None
        if expression is not None:
            value = pipe.call("Runtime.evaluate", {"expression": expression,
                                                   "returnByValue": True}, session=session)
            value = value.get("result", {}).get("value")
        time.sleep(0.2)    # late console messages of the load
        pipe.events += _drain(pipe)
        try:
            pipe.call("Browser.close", timeout=5)
        except BrowserError:
            pass
        return PageResult(_errors(pipe.events), base64.b64decode(shot["data"]),
                          title.get("result", {}).get("value", ""), full_height, value)
    finally:
        for fd in (to_child_w, from_child_r):
            try:
                os.close(fd)
            except OSError:
                pass
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        shutil.rmtree(profile, ignore_errors=True)


def _drain(pipe: _Pipe) -> list[dict]:
    out = []
    while True:
        ready, _, _ = select.select([pipe.r], [], [], 0)
        if not ready and b"\0" not in pipe.buf:
            return out
        try:
            out.append(pipe.receive(time.monotonic() + 0.5))
        except BrowserError:
            return out
