"""A minimal headless-chromium driver over the DevTools protocol pipe (no extra packages)."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

CHROMIUM_NAMES = ("chromium", "chromium-browser", "google-chrome")


def find_chromium() -> str | None:
    for name in CHROMIUM_NAMES:
        p = shutil.which(name)
        if p:
            return p
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None


def base_flags(profile: str) -> list[str]:
    return ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-extensions",
            "--mute-audio", f"--user-data-dir={profile}"]


class Page:
    """One tab: navigate, evaluate JS, and every console error, exception and dialog it raised."""

    def __init__(self, exe: str, timeout: float = 30.0) -> None:
        self.timeout = timeout
        self._profile = tempfile.mkdtemp(prefix="ctwd-chromium-")
        to_r, self._to_w = os.pipe()
        self._from_r, from_w = os.pipe()

        def fds() -> None:  # the browser reads commands on fd 3 and writes replies on fd 4
            a, b = os.dup(to_r), os.dup(from_w)  # via fresh fds: the pipe may already sit on 3 or 4
            os.dup2(a, 3)
            os.dup2(b, 4)

        self.proc = subprocess.Popen([exe, *base_flags(self._profile), "--remote-debugging-pipe", "about:blank"],
                                     stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                     preexec_fn=fds, close_fds=False)
        os.close(to_r)
        os.close(from_w)
        self._buf = b""
        self._id = 0
        self.events: list[dict] = []
        target = self._call("Target.createTarget", {"url": "about:blank"})["targetId"]
        self.session = self._call("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Runtime", "Log", "Page"):
            self.call(f"{domain}.enable")

    # -- protocol -----------------------------------------------------------------------------
    def _send(self, msg: dict) -> int:
        self._id += 1
        msg["id"] = self._id
        os.write(self._to_w, json.dumps(msg).encode() + b"\0")
        return self._id

    def _read(self) -> dict:
        while b"\0" not in self._buf:
            chunk = os.read(self._from_r, 1 << 16)
            if not chunk:
                raise RuntimeError("chromium closed the DevTools pipe")
            self._buf += chunk
        raw, self._buf = self._buf.split(b"\0", 1)
        return json.loads(raw)

    def _wait(self, pred, what: str) -> dict:
        deadline = time.monotonic() + self.timeout
        while time.monotonic() < deadline:
            msg = self._read()
            if "method" in msg:
                self.events.append(msg)
                if msg["method"] == "Page.javascriptDialogOpening":  # an injected alert(): note it, dismiss it
                    self._send({"method": "Page.handleJavaScriptDialog", "params": {"accept": False},
                                "sessionId": msg.get("sessionId", self.session)})
            if pred(msg):
                return msg
        raise TimeoutError(f"chromium: no {what} within {self.timeout} s")

    def _call(self, method: str, params: dict | None = None, session: str | None = None) -> dict:
        msg = {"method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        i = self._send(msg)
        reply = self._wait(lambda m: m.get("id") == i, method)
        if "error" in reply:
            raise RuntimeError(f"{method}: {reply['error']}")
        return reply.get("result", {})

    def call(self, method: str, params: dict | None = None) -> dict:
        return self._call(method, params, self.session)

    # -- use --------------------------------------------------------------------------------------
    def goto(self, url: str) -> None:
        n = len(self.events)
        self.call("Page.navigate", {"url": url})
        if not any(e["method"] == "Page.loadEventFired" for e in self.events[n:]):
            self._wait(lambda m: m.get("method") == "Page.loadEventFired", "load event")
        self.eval("1")  # drain: everything the page logged while loading has arrived

    def eval(self, expression: str):
        r = self.call("Runtime.evaluate", {"expression": expression, "returnByValue": True, "awaitPromise": True})
        if "exceptionDetails" in r:
            raise RuntimeError(f"JS error: {r['exceptionDetails'].get('text')} in {expression[:80]}")
        return r["result"].get("value")

    def errors(self) -> list[str]:
        """Uncaught exceptions, console.error calls, and error-level log entries (e.g. failed loads)."""
        out = []
        for e in self.events:
            m, p = e["method"], e.get("params", {})
            if m == "Runtime.exceptionThrown":
                out.append("exception: " + json.dumps(p.get("exceptionDetails", {}))[:300])
            elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                out.append("console.error: " + json.dumps(p.get("args"))[:300])
            elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                out.append("log: " + p["entry"].get("text", "")[:300] + " " + p["entry"].get("url", ""))
        return out

    def dialogs(self) -> list[str]:
        return [e["params"].get("message", "") for e in self.events if e["method"] == "Page.javascriptDialogOpening"]

    def close(self) -> None:
        try:
            self._send({"method": "Browser.close"})
            self.proc.wait(timeout=10)
        except Exception:  # noqa: BLE001
            self.proc.kill()
            self.proc.wait()
        finally:
            os.close(self._to_w)
            os.close(self._from_r)
            shutil.rmtree(self._profile, ignore_errors=True)
