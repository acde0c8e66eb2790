"""Explore the op-amp catalog for a target, pick the first Pareto candidate, download its files.

A plain ``requests`` script for Python users of the gainchain service (README scenario: a
40 kHz ultrasonic receive chain, 60 dB from 2 kHz to 200 kHz on 5 V):

    python examples/explore_and_download.py --base-url http://127.0.0.1:8000 --out build/

1. ``POST /v1/explorations`` with the design request minus ``opamp`` (the whole catalog);
2. print the candidates in rank order and take the first with ``pareto: true``;
3. ``POST /v1/exports/<kind>`` with the same request, that candidate's ``opamp`` and
   ``stages``, for the five kinds, each saved under the name the service gives it.

Every file carries the candidate's ``design_id``. Exit status 0 on success, 1 when no
candidate meets the target. ``--api-key`` (or ``GAINCHAIN_API_KEY``) is sent as a Bearer
token when the service asks for one. A design aid: prototype and measure before use.
"""

from __future__ import annotations

import argparse
import os
import re
import sys
from pathlib import Path

import requests

KINDS = ("bom.xlsx", "bom.csv", "netlist.cir", "netlist.net", "netlist.xml")

REQUEST = {
    "name": "ultrasonic-rx-40k",
    "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
    "supply": {"kind": "single", "v_pos": 5},
    "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 200, "load_ohm": 10000},
}


def _session(api_key: str | None) -> requests.Session:
    session = requests.Session()
    if api_key:
        session.headers["Authorization"] = f"Bearer {api_key}"
    return session


def _check(resp: requests.Response) -> requests.Response:
    if resp.status_code != 200:
        raise SystemExit(f"{resp.request.method} {resp.url}: {resp.status_code} {resp.text[:500]}")
    return resp


def explore(session: requests.Session, base_url: str, request: dict) -> dict:
    return _check(session.post(f"{base_url}/v1/explorations", json=request, timeout=60)).json()


def first_pareto(exploration: dict) -> dict | None:
    return next((c for c in exploration["candidates"] if c["pareto"]), None)


def download(session: requests.Session, base_url: str, request: dict, candidate: dict,
             out_dir: Path) -> list[Path]:
    body = {**request, "opamp": candidate["opamp_id"], "stages": candidate["stage_count"]}
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = []
    for kind in KINDS:
        resp = _check(session.post(f"{base_url}/v1/exports/{kind}", json=body, timeout=60))
        match = re.search(r'filename="([^"]+)"', resp.headers.get("Content-Disposition", ""))
        path = out_dir / Path(match.group(1) if match else f"design-{kind}").name
        path.write_bytes(resp.content)
        paths.append(path)
    return paths


def _table(exploration: dict) -> str:
    lines = ["rank  op-amp               stages  status          pareto  parts  "
             "in. noise (uV rms)  supply (mA)  BOM cost"]
    for c in exploration["candidates"]:
        noise = "-" if c["input_noise_rms_v"] is None else f"{c['input_noise_rms_v'] * 1e6:.2f}"
        cost = c["bom_cost"] or {}
        price = "" if cost.get("total") is None else f"{cost['total']:.3f} {cost['currency']}"
        pareto = "yes" if c["pareto"] else "no"
        lines.append(f"{c['rank']:>4}  {c['opamp_id'] or '-':<20} {c['stage_count']:>6}  "
                     f"{c['status']:<15} {pareto:<6}  {c['part_count']:>5}  {noise:>18}  "
                     f"{c['supply_current_a'] * 1e3:>11.3f}  {price}")
    for s in exploration.get("skipped", []):
        lines.append(f"   -  {s['opamp_id'] or '-':<20} skipped: {s['detail']}")
    return "\n".join(lines)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--base-url", default=os.environ.get("GAINCHAIN_URL",
                                                             "http://127.0.0.1:8000"))
    parser.add_argument("--out", default=".", type=Path, help="directory for the five files")
    parser.add_argument("--api-key", default=os.environ.get("GAINCHAIN_API_KEY"))
    args = parser.parse_args(argv)
    base_url = args.base_url.rstrip("/")
    session = _session(args.api_key)
    exploration = explore(session, base_url, REQUEST)
    print(_table(exploration))
    chosen = first_pareto(exploration)
    if chosen is None:
        print("no candidate meets the target", file=sys.stderr)
        return 1
    print(f"\nchosen: {chosen['opamp_id']}, {chosen['stage_count']} stage(s), "
          f"design_id {chosen['design_id']}")
    for path in download(session, base_url, REQUEST, chosen, args.out):
        print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
