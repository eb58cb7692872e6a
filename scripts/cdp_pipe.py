"""Headless Chromium driven over its DevTools pipe, for scripts/bench --page and
tests/cli/html_page.py: one browser serves many page loads (its start-up is most of the cost
of a --dump-dom run). Standard library only; the browser is Debian's chromium."""
import json
import os
import shutil
import subprocess


class BrowserError(Exception):
    pass


class Browser:
    """Headless Chromium driven over its DevTools pipe (--remote-debugging-pipe: JSON messages
    ended by NUL on file descriptors 3 and 4), so one browser serves every measurement."""

    def __init__(self, home, wrap=(), size=(1280, 800)):
        """home: the profile directory (created); wrap: a command to run the browser under
        (e.g. unshare -n); size: the window in CSS pixels."""
        chrome = shutil.which("chromium")
        if not chrome:
            raise BrowserError("chromium is missing (scripts/setup installs it)")
        self.to_r, self.to_w = os.pipe()
        self.from_r, self.from_w = os.pipe()
        self.home = home
        os.makedirs(self.home, exist_ok=True)

        # the pipe's ends become the browser's descriptors 3 (commands) and 4 (answers)
        redirect = f'exec "$0" "$@" 3<&{self.to_r} 4>&{self.from_w}'
        self.proc = subprocess.Popen(
            list(wrap) + ["sh", "-c", redirect, chrome, "--headless", "--no-sandbox",
                          "--disable-gpu", "--no-first-run", "--disable-extensions",
                          "--remote-debugging-pipe", "--window-size=%d,%d" % size,
                          "--user-data-dir=" + self.home, "about:blank"],
            pass_fds=(self.to_r, self.from_w), stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL)
        os.close(self.to_r)
        os.close(self.from_w)
        self.buf, self.next_id, self.events = b"", 0, []
        t = self.call("Target.createTarget", url="about:blank")["targetId"]
        self.session = self.call("Target.attachToTarget", targetId=t, flatten=True)["sessionId"]
        self.call("Page.enable", session=True)

    def send(self, method, session=False, **params):
        self.next_id += 1
        msg = {"id": self.next_id, "method": method, "params": params}
        if session:
            msg["sessionId"] = self.session
        os.write(self.to_w, json.dumps(msg).encode() + b"\0")
        return self.next_id

    def read(self):
        while b"\0" not in self.buf:
            chunk = os.read(self.from_r, 1 << 20)
            if not chunk:
                raise BrowserError("chromium closed its DevTools pipe")
            self.buf += chunk
        msg, self.buf = self.buf.split(b"\0", 1)
        return json.loads(msg)

    def call(self, method, session=False, **params):
        i = self.send(method, session, **params)
        while True:
            m = self.read()
            if m.get("id") == i:
                if "error" in m:
                    raise BrowserError(f"{method}: {m['error']}")
                return m.get("result", {})
            self.events.append(m)

    def wait_event(self, name):
        while True:
            for k, m in enumerate(self.events):
                if m.get("method") == name:
                    del self.events[k]
                    return m
            self.events.append(self.read())

    def js(self, expr):
        r = self.call("Runtime.evaluate", session=True, expression=expr, awaitPromise=True,
                      returnByValue=True)
        if "exceptionDetails" in r:
            raise BrowserError(f"script failed: {r['exceptionDetails']}")
        return r["result"].get("value")

    def load(self, url):
        """A fresh load of url (about:blank first, so a new fragment is a new page)."""
        for u in ("about:blank", url):
            self.call("Page.navigate", session=True, url=u)
            self.wait_event("Page.loadEventFired")

    def dom(self):
        """The document as the browser holds it now (after its scripts ran)."""
        return self.js("document.documentElement.outerHTML")

    def screenshot(self, path):
        import base64
        png = self.call("Page.captureScreenshot", session=True, format="png")["data"]
        with open(path, "wb") as f:
            f.write(base64.b64decode(png))

    def close(self):
        self.proc.kill()
        self.proc.wait()
