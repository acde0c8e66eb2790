"""Serve gainchain for production: nginx (the front) in front of gunicorn, in one process
group. The container's CMD and `make serve-prod` run exactly this:

    python docker/front.py

* gunicorn (``docker/gunicorn.conf.py``) listens on a Unix socket in a private runtime
  directory, so only the front reaches it;
* nginx listens on ``HOST:PORT`` for the API and on ``HOST:GAINCHAIN_METRICS_PORT`` (default
  9100) for ``/metrics``; it reads whole requests and buffers whole replies, so slow clients
  never hold a worker thread, and it applies the per-client limits
  (``docker/nginx/gainchain-http.conf``, ``gainchain-server.conf``);
* nginx's stderr lines are re-written as JSON objects (``"logger": "nginx"``), so stderr
  stays one JSON object per line;
* SIGTERM/SIGINT stop both; when either exits, the other is stopped and this exits with
  its status (the container or pod then restarts).

Environment: HOST, PORT, GAINCHAIN_METRICS_PORT, GAINCHAIN_MAX_BODY_BYTES,
GAINCHAIN_TRUSTED_PROXIES (comma-separated addresses/CIDRs whose X-Forwarded-For is
believed for the per-client limits: the compose edge, a cluster's ingress), GAINCHAIN_NGINX
(the nginx binary, default ``nginx`` on PATH), GAINCHAIN_RUNTIME_DIR (default: a new
directory under the system temporary directory), and everything gunicorn.conf.py reads.
"""

from __future__ import annotations

import ipaddress
import json
import os
import re
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

DOCKER_DIR = Path(__file__).resolve().parent
ROOT = DOCKER_DIR.parent
NGINX_DIR = DOCKER_DIR / "nginx"
SHARED_FILES = ("gainchain-http.conf", "gainchain-server.conf", "gainchain-headers.conf")
DEFAULT_METRICS_PORT = 9100
DEFAULT_MAX_BODY_BYTES = 256 * 1024


def _port(env, name: str, default: int) -> int:
    raw = (env.get(name) or "").strip() or str(default)
    if not raw.isascii() or not raw.isdigit() or not 0 < int(raw) < 65536:
        raise SystemExit(f"{name} must be a TCP port number, got {raw!r}")
    return int(raw)


def _listen(host: str, port: int) -> str:
    return f"[{host}]:{port}" if ":" in host else f"{host}:{port}"


def trusted_proxies(raw: str) -> list[str]:
    """Validated networks of GAINCHAIN_TRUSTED_PROXIES (a bad entry stops start-up)."""
    out = []
    for part in (p.strip() for p in raw.split(",")):
        if not part:
            continue
        try:
            out.append(str(ipaddress.ip_network(part, strict=False)))
        except ValueError as exc:
            raise SystemExit(f"GAINCHAIN_TRUSTED_PROXIES: {part!r} is not an address or "
                             f"network: {exc}") from None
    return out


def render(runtime_dir: Path, env=None) -> Path:
    """Write the front's nginx.conf (and the shared files) into ``runtime_dir``."""
    env = os.environ if env is None else env
    host = (env.get("HOST") or "127.0.0.1").strip()
    if not re.fullmatch(r"[A-Za-z0-9.:-]{1,253}", host):
        raise SystemExit(f"HOST must be an address or a host name, got {host!r}")
    port = _port(env, "PORT", 8000)
    metrics_port = _port(env, "GAINCHAIN_METRICS_PORT", DEFAULT_METRICS_PORT)
    raw_body = (env.get("GAINCHAIN_MAX_BODY_BYTES") or "").strip() or str(DEFAULT_MAX_BODY_BYTES)
    if not raw_body.isascii() or not raw_body.isdigit() or int(raw_body) < 1:
        raise SystemExit(f"GAINCHAIN_MAX_BODY_BYTES must be a positive integer, got {raw_body!r}")
    max_body = int(raw_body)
    real_ip = "".join(f"    set_real_ip_from {net};\n"
                      for net in trusted_proxies(env.get("GAINCHAIN_TRUSTED_PROXIES") or ""))
    if real_ip:
        real_ip += "    real_ip_header X-Forwarded-For;\n    real_ip_recursive on;\n"
    user = ""
    for sub in ("client_body", "proxy", "fastcgi", "uwsgi", "scgi"):
        (runtime_dir / sub).mkdir(parents=True, exist_ok=True)
    if os.geteuid() == 0:
        # Started as root (a CI machine; never the image, which runs as uid 10001): nginx
        # then runs its workers as "nobody", who must reach the socket and the temp dirs.
        import grp
        import pwd

        nobody = pwd.getpwnam("nobody")
        user = f"user nobody {grp.getgrgid(nobody.pw_gid).gr_name};\n"
        runtime_dir.chmod(0o711)
        for sub in ("client_body", "proxy", "fastcgi", "uwsgi", "scgi"):
            os.chown(runtime_dir / sub, nobody.pw_uid, nobody.pw_gid)
    for name in SHARED_FILES:
        shutil.copyfile(NGINX_DIR / name, runtime_dir / name)
    text = (NGINX_DIR / "front.conf.template").read_text(encoding="utf-8")
    for token, value in {"@RUNTIME_DIR@": str(runtime_dir),
                         "@UPSTREAM@": f"unix:{socket_path(runtime_dir)}",
                         "@LISTEN@": _listen(host, port),
                         "@METRICS_LISTEN@": _listen(host, metrics_port),
                         "@MAX_BODY@": str(max_body),
                         "@REAL_IP@": real_ip, "@USER@": user}.items():
        text = text.replace(token, value)
    conf = runtime_dir / "nginx.conf"
    conf.write_text(text, encoding="utf-8")
    return conf


def socket_path(runtime_dir: Path) -> Path:
    return runtime_dir / "gunicorn.sock"


def nginx_argv(env, conf: Path) -> list[str]:
    binary = env.get("GAINCHAIN_NGINX") or shutil.which("nginx") or "/usr/sbin/nginx"
    return [binary, "-e", "stderr", "-p", str(conf.parent), "-c", str(conf),
            "-g", "daemon off;"]


def gunicorn_argv() -> list[str]:
    return [sys.executable, "-m", "gunicorn", "-c", str(DOCKER_DIR / "gunicorn.conf.py"),
            "service:create_app()"]


def _relay_as_json(stream, out) -> None:
    """Copy nginx's plain-text stderr lines to ``out`` as one JSON object each."""
    for raw in iter(stream.readline, b""):
        line = raw.decode("utf-8", errors="replace").rstrip("\n")
        if not line:
            continue
        doc = {"ts": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()), "level": "WARNING",
               "logger": "nginx", "msg": line}
        out.write(json.dumps(doc, ensure_ascii=False) + "\n")
        out.flush()


def main() -> int:
    env = dict(os.environ)
    runtime = env.get("GAINCHAIN_RUNTIME_DIR")
    runtime_dir = Path(runtime) if runtime else Path(tempfile.mkdtemp(prefix="gainchain-front-"))
    runtime_dir.mkdir(parents=True, exist_ok=True)
    conf = render(runtime_dir, env)
    sock = socket_path(runtime_dir)
    if sock.exists():
        sock.unlink()
    check = subprocess.run(nginx_argv(env, conf)[:-2] + ["-t", "-q"], capture_output=True,
                           text=True)
    if check.returncode != 0:
        sys.stderr.write(json.dumps({"level": "CRITICAL", "logger": "nginx",
                                     "msg": "front configuration refused: "
                                            + check.stderr.strip()}) + "\n")
        return 1
    gunicorn_env = dict(env, GAINCHAIN_BIND=f"unix:{sock}")
    gunicorn = subprocess.Popen(gunicorn_argv(), cwd=ROOT, env=gunicorn_env)
    # nginx starts once the socket exists, so its first requests do not fail.
    deadline = time.monotonic() + 60
    while not sock.exists() and gunicorn.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    nginx = subprocess.Popen(nginx_argv(env, conf), stderr=subprocess.PIPE)
    relay = threading.Thread(target=_relay_as_json, args=(nginx.stderr, sys.stderr),
                             daemon=True)
    relay.start()
    children = (nginx, gunicorn)
    stopping = threading.Event()

    def stop(signum=signal.SIGTERM, _frame=None):
        stopping.set()
        for child in children:
            if child.poll() is None:
                child.send_signal(signal.SIGQUIT if child is nginx else signal.SIGTERM)

    signal.signal(signal.SIGTERM, stop)
    signal.signal(signal.SIGINT, stop)
    status = 0  # stopped by a signal: a clean exit
    try:
        while not stopping.is_set():
            ended = [c for c in children if c.poll() is not None]
            if ended:  # one side died on its own: stop the other, report a failure
                status = ended[0].returncode or 1
                break
            time.sleep(0.2)
    finally:
        stop()
        for child in children:
            try:
                child.wait(timeout=30)
            except subprocess.TimeoutExpired:
                child.kill()
                child.wait()
        relay.join(timeout=2)
        if not runtime:
            shutil.rmtree(runtime_dir, ignore_errors=True)
    return status


if __name__ == "__main__":
    sys.exit(main())
