"""Shared by the front tests: finding nginx, a small nginx configuration parser, and
starting ``docker/front.py`` (the container's command) on free loopback ports.

nginx's configuration syntax (nginx documentation, "Configuration file's structure"):
directives are words ended by ``;`` or followed by a ``{ ... }`` block, ``#`` starts a
comment, single or double quotes group a word.
"""

from __future__ import annotations

import http.client
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
FRONT = ROOT / "docker" / "front.py"
NGINX = shutil.which("nginx") or next(
    (p for p in ("/usr/sbin/nginx", "/usr/local/sbin/nginx") if Path(p).exists()), None)


def require_nginx() -> str:
    """The nginx path; skip when absent, but fail under CI=true (.ci/run installs it)."""
    if NGINX is None:
        if os.environ.get("CI") == "true":
            pytest.fail("nginx is required under CI=true (apt-get install nginx)")
        pytest.skip("nginx not installed: the live front tests are skipped locally "
                    "(the configuration checks still run)")
    return NGINX


@dataclass
class Directive:
    name: str
    args: list[str]
    block: list[Directive] | None = None
    children: list[Directive] = field(default_factory=list)

    def find(self, name: str) -> list[Directive]:
        return [d for d in self.children if d.name == name]

    def walk(self):
        for d in self.children:
            yield d
            yield from d.walk()


def _tokens(text: str):
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        if ch.isspace():
            i += 1
        elif ch == "#":
            while i < n and text[i] != "\n":
                i += 1
        elif ch in "{};":
            yield ch
            i += 1
        elif ch in "'\"":
            end = text.index(ch, i + 1)
            yield text[i + 1:end]
            i = end + 1
        else:
            start = i
            while i < n and not text[i].isspace() and text[i] not in "{};":
                i += 1
            yield text[start:i]


def parse_nginx(text: str) -> Directive:
    """The configuration as a tree of directives (root named "main")."""
    root = Directive("main", [])
    stack, words = [root], []
    for tok in _tokens(text):
        if tok == ";":
            stack[-1].children.append(Directive(words[0], words[1:]))
            words = []
        elif tok == "{":
            node = Directive(words[0], words[1:])
            stack[-1].children.append(node)
            stack.append(node)
            words = []
        elif tok == "}":
            assert not words, f"dangling words {words}"
            stack.pop()
        else:
            words.append(tok)
    assert len(stack) == 1 and not words, "unbalanced configuration"
    return root


def expand_includes(node: Directive, base: Path) -> Directive:
    """Replace ``include file;`` by the parsed file (relative to ``base``), recursively."""
    out = []
    for d in node.children:
        if d.name == "include" and not any(c in d.args[0] for c in "*?"):
            inc = parse_nginx((base / d.args[0]).read_text(encoding="utf-8"))
            out.extend(expand_includes(inc, base).children)
        else:
            d.children = expand_includes(d, base).children
            out.append(d)
    node.children = out
    return node


def seconds(value: str) -> float:
    units = {"ms": 0.001, "s": 1, "m": 60, "h": 3600}
    for suffix in ("ms", "s", "m", "h"):
        if value.endswith(suffix):
            return float(value[:-len(suffix)]) * units[suffix]
    return float(value)


def size_bytes(value: str) -> int:
    mult = {"k": 1024, "m": 1024 ** 2, "g": 1024 ** 3}
    last = value[-1].lower()
    return int(value[:-1]) * mult[last] if last in mult else int(value)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def get(port: int, path: str, *, method: str = "GET", body: bytes | None = None,
        headers=None, timeout: float = 5.0):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=timeout)
    try:
        conn.request(method, path, body=body, headers=headers or {})
        resp = conn.getresponse()
        return resp.status, dict(resp.getheaders()), resp.read()
    finally:
        conn.close()


class Front:
    """``python docker/front.py`` on free ports; stopped with SIGTERM."""

    def __init__(self, tmp: Path, env_extra: dict | None = None, argv: list[str] | None = None):
        self.port, self.metrics_port = free_port(), free_port()
        env = {k: v for k, v in os.environ.items() if not k.startswith("GAINCHAIN_")}
        env.update({"HOST": "127.0.0.1", "PORT": str(self.port),
                    "GAINCHAIN_METRICS_PORT": str(self.metrics_port),
                    "GAINCHAIN_WORKERS": "2", "OMP_NUM_THREADS": "1",
                    "GAINCHAIN_NGINX": require_nginx(),
                    "PROMETHEUS_MULTIPROC_DIR": str(tmp / "prom")})
        env.update(env_extra or {})
        self.log_path = tmp / "stderr.log"
        self._log = open(self.log_path, "wb")  # a file: a full pipe would block the server
        self.proc = subprocess.Popen(argv or [sys.executable, str(FRONT)], cwd=ROOT, env=env,
                                     stdout=subprocess.DEVNULL, stderr=self._log,
                                     start_new_session=True)
        self.healthz_polls = 0

    def wait_ready(self, timeout_s: float = 60.0) -> None:
        deadline = time.monotonic() + timeout_s
        while True:
            if self.proc.poll() is not None:
                pytest.fail("front exited: " + self.log_path.read_text(errors="replace")[-3000:])
            try:
                status, _, _ = get(self.port, "/healthz", timeout=1.0)
                if status != 502:  # 502: nginx is up, gunicorn not yet
                    self.healthz_polls += 1
                if status == 200:
                    return
            except OSError:
                pass
            if time.monotonic() > deadline:
                pytest.fail(f"the front did not answer /healthz within {timeout_s} s")
            time.sleep(0.2)

    def stop(self) -> None:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
        try:
            self.proc.wait(timeout=40)
        except subprocess.TimeoutExpired:
            os.killpg(self.proc.pid, signal.SIGKILL)
            self.proc.wait(timeout=10)
        self._log.close()
