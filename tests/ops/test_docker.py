"""Lint docker/Dockerfile and docker/gunicorn.conf.py with small parsers (the image cannot be
built on the CI machines; tests/ops/test_gunicorn_serve.py runs its command instead)."""

from __future__ import annotations

import json
import re
import shlex
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
DOCKERFILE = ROOT / "docker" / "Dockerfile"
BUILD_TOOLS = ("gcc", "g++", "build-essential", "make", "clang", "cmake", "curl", "wget")


def dockerfile_instructions(text: str) -> list[tuple[str, str]]:
    """(INSTRUCTION, arguments) pairs; joins backslash continuations, drops comments."""
    out, pending = [], ""
    for line in text.splitlines():
        stripped = line.strip()
        if not pending and (not stripped or stripped.startswith("#")):
            continue
        if stripped.endswith("\\"):
            pending += stripped[:-1] + " "
            continue
        full = (pending + stripped).strip()
        pending = ""
        keyword, _, args = full.partition(" ")
        out.append((keyword.upper(), args.strip()))
    assert not pending, "dangling line continuation"
    return out


def stages(instructions):
    """Split into build stages: list of lists of instructions, each starting with FROM."""
    result = []
    for ins in instructions:
        if ins[0] == "FROM":
            result.append([])
        assert result, "instruction before the first FROM"
        result[-1].append(ins)
    return result


def makefile_serve_prod_command() -> list[str]:
    text = (ROOT / "Makefile").read_text(encoding="utf-8")
    recipe = re.search(r"^serve-prod:.*\n((?:\t.*\n)+)", text, re.M)
    assert recipe, "Makefile has no serve-prod recipe"
    lines = [ln.strip() for ln in recipe.group(1).splitlines() if ln.strip()]
    assert lines[0].startswith("@echo"), "serve-prod should say what it is for"
    argv = shlex.split(lines[-1])
    while argv and re.fullmatch(r"[A-Z_]+=.*", argv[0]):  # leading VAR=value assignments
        argv.pop(0)
    argv[0] = argv[0].replace("$(BIN)/", "")
    return argv


@pytest.fixture(scope="module")
def parsed():
    return stages(dockerfile_instructions(DOCKERFILE.read_text(encoding="utf-8")))


def test_multi_stage_on_slim_python(parsed):
    assert len(parsed) >= 2
    for stage in parsed:
        image = stage[0][1].split()[0]
        assert re.fullmatch(r"python:3\.1[1-9]-slim(?:-[a-z]+)?", image), image


def test_final_stage_runs_as_non_root(parsed):
    final = parsed[-1]
    users = [args for kw, args in final if kw == "USER"]
    assert users, "no USER in the final stage"
    user = users[-1].split(":")[0]
    assert user not in ("root", "0")
    # USER comes after the last RUN, so nothing after it runs as root.
    kinds = [kw for kw, _ in final]
    assert kinds.index("USER") > max(i for i, k in enumerate(kinds) if k == "RUN")


def test_no_build_tools_in_final_stage(parsed):
    final_runs = " ".join(args for kw, args in parsed[-1] if kw == "RUN")
    for tool in BUILD_TOOLS:
        assert not re.search(rf"\b{re.escape(tool)}\b", final_runs), tool
    assert "pip install" not in final_runs
    copies = [args for kw, args in parsed[-1] if kw == "COPY"]
    assert any("--from=" in c for c in copies), "final stage should copy the built venv"


def test_healthcheck_uses_python_on_healthz(parsed):
    checks = [args for kw, args in parsed[-1] if kw == "HEALTHCHECK"]
    assert len(checks) == 1
    cmd = checks[0].split("CMD", 1)[1].strip()
    argv = json.loads(cmd)
    assert argv[0] == "python" and "/healthz" in argv[-1]
    compile(argv[-1], "<healthcheck>", "exec")  # the inline script is valid Python


def test_threads_pinned_and_unbuffered(parsed):
    env = " ".join(args for kw, args in parsed[-1] if kw == "ENV")
    assert "OMP_NUM_THREADS=1" in env and "PYTHONUNBUFFERED=1" in env


def test_cmd_is_exec_form_and_equals_make_serve_prod(parsed):
    cmds = [args for kw, args in parsed[-1] if kw == "CMD"]
    assert len(cmds) == 1
    argv = json.loads(cmds[0])  # exec form is a JSON array; shell form would not parse
    assert argv == makefile_serve_prod_command()
    assert argv == ["python", "docker/front.py"]  # the nginx front, then gunicorn


def test_parser_catches_shell_form_and_root():
    # Control: the lint really rejects the things it looks for.
    bad = stages(dockerfile_instructions(
        "FROM python:3.11\nRUN apt-get install -y gcc\nUSER root\nCMD gunicorn app:app\n"))
    with pytest.raises(json.JSONDecodeError):
        json.loads([a for k, a in bad[-1] if k == "CMD"][0])
    assert not re.fullmatch(r"python:3\.1[1-9]-slim(?:-[a-z]+)?", bad[0][0][1])


GUNICORN_DEFAULTS = {"limit_request_line": 4094, "limit_request_fields": 100,
                     "limit_request_field_size": 8190}
# gunicorn's documented maxima for these settings (gunicorn settings reference).
GUNICORN_MAXIMA = {"limit_request_line": 8190, "limit_request_fields": 32768,
                   "limit_request_field_size": 8190}


def _load_gunicorn_config(env_extra: dict) -> dict:
    # Loaded in a subprocess through gunicorn's own Config class: the file sets
    # PROMETHEUS_MULTIPROC_DIR, which must not leak into this test process.
    code = """
import json, runpy, sys
from gunicorn.config import Config
cfg = Config()
ns = runpy.run_path(sys.argv[1])
for key, value in ns.items():
    if key in cfg.settings:
        cfg.set(key, value)
names = ["bind", "workers", "worker_class", "threads", "timeout", "graceful_timeout",
         "max_requests", "max_requests_jitter", "preload_app", "limit_request_line",
         "limit_request_fields", "limit_request_field_size", "control_socket_disable",
         "forwarded_allow_ips", "errorlog", "accesslog"]
out = {n: getattr(cfg, n) for n in names}
out["defaults"] = {n: cfg.settings[n].default for n in ("limit_request_line",
    "limit_request_fields", "limit_request_field_size", "forwarded_allow_ips")}
out["hooks"] = sorted(k for k in ("child_exit", "on_exit") if callable(ns.get(k)))
out["set_names"] = sorted(k for k in ns if k in cfg.settings)
out["multiproc"] = ns["os"].environ.get("PROMETHEUS_MULTIPROC_DIR")
out["omp"] = ns["os"].environ.get("OMP_NUM_THREADS")
out["root_handlers"] = ns["logconfig_dict"].get("root", {}).get("handlers")
import gunicorn.util
out["write_error"] = gunicorn.util.write_error.__module__
ns["on_exit"](None)
print(json.dumps(out, default=str))
"""
    import os

    env = {k: v for k, v in os.environ.items()
           if k not in ("PROMETHEUS_MULTIPROC_DIR", "HOST", "PORT", "GAINCHAIN_WORKERS",
                        "OMP_NUM_THREADS")}
    env.update(env_extra)
    done = subprocess.run([sys.executable, "-c", code, str(ROOT / "docker" / "gunicorn.conf.py")],
                          capture_output=True, text=True, env=env, timeout=60, check=True)
    return json.loads(done.stdout)


def test_gunicorn_config_values():
    cfg = _load_gunicorn_config({"HOST": "0.0.0.0", "PORT": "9123"})
    assert cfg["bind"] == ["0.0.0.0:9123"]
    assert cfg["workers"] >= 2 and "ThreadWorker" in cfg["worker_class"]
    assert cfg["threads"] >= 2  # a probe finds a free thread beside long computations
    assert cfg["timeout"] > 10  # above the default compute budget (10 s)
    # Issue 10: 1000 recycled each worker about once a second under load.
    assert cfg["max_requests"] >= 50_000 and 0 < cfg["max_requests_jitter"] <= \
        cfg["max_requests"] // 5
    assert cfg["preload_app"] is True
    for name, default in GUNICORN_DEFAULTS.items():
        assert cfg["defaults"][name] == default  # gunicorn's documented defaults
        # Above what the front lets through (tests/ops/test_front.py), within the maxima.
        assert default <= cfg[name] <= GUNICORN_MAXIMA[name], name
    bind = _load_gunicorn_config({"GAINCHAIN_BIND": "unix:/tmp/gc-test.sock"})["bind"]
    assert bind == ["unix:/tmp/gc-test.sock"]
    assert cfg["control_socket_disable"] is True
    assert "forwarded_allow_ips" not in cfg["set_names"]  # left at gunicorn's default
    default_ips = cfg["defaults"]["forwarded_allow_ips"]
    assert cfg["forwarded_allow_ips"] == [ip.strip() for ip in default_ips.split(",")]
    assert cfg["errorlog"] == "-"
    assert cfg["hooks"] == ["child_exit", "on_exit"]
    assert cfg["omp"] == "1"
    # Issue 10: gunicorn's logging defaults send the root logger to stdout; here it goes to
    # gunicorn's stderr handler (gunicorn.glogging.CONFIG_DEFAULTS names its stream).
    from gunicorn.glogging import CONFIG_DEFAULTS

    assert cfg["root_handlers"] == ["error_console"]
    # gunicorn's own refusals (400/414/431...) go through the problem+json writer.
    assert cfg["write_error"] == "service.ops.gunicorn_errors"
    assert CONFIG_DEFAULTS["handlers"]["error_console"]["stream"] == "ext://sys.stderr"
    assert cfg["multiproc"] and "gainchain-metrics-" in cfg["multiproc"]
    assert not Path(cfg["multiproc"]).exists()  # on_exit removed the directory it made


def test_final_stage_carries_the_front(parsed):
    # Issue 10: the container's path has the front too: Debian's nginx, the launcher and
    # the shared nginx configuration in the image, both ports exposed.
    final = parsed[-1]
    runs = " ".join(args for kw, args in final if kw == "RUN")
    assert re.search(r"apt-get install -y --no-install-recommends nginx\b", runs)
    assert "rm -rf /var/lib/apt/lists/*" in runs
    copies = " ".join(args for kw, args in final if kw == "COPY")
    assert "docker/front.py" in copies and "docker/nginx" in copies
    exposed = " ".join(args for kw, args in final if kw == "EXPOSE").split()
    assert exposed == ["8000", "9100"]
