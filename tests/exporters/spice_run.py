"""Run a SPICE deck in ngspice (batch mode) and read its ``.print ac`` table.

Used by the tests and by ``report_ngspice.py``. ngspice runs in a fresh temporary folder with
an argument list (no shell) and a timeout (common practice). Exit status 0 proves little,
so the caller checks the row count, and any "error" or "warning" in the output fails
here (a missing value only warns: ngspice behaviour, from memory).
"""

from __future__ import annotations

import os
import subprocess
import tempfile

import numpy as np
from ngspice_support import NGSPICE, require_ngspice  # noqa: F401 (re-exported)


def run_deck(deck: str, timeout_s: float = 120.0) -> tuple[str, str]:
    """Run ``ngspice -b deck.cir`` in a temporary folder; return (stdout, folder listing)."""
    exe = NGSPICE or "ngspice"
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "deck.cir")
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(deck)
        proc = subprocess.run([exe, "-b", "deck.cir"], cwd=tmp, capture_output=True,
                              text=True, timeout=timeout_s, check=False)
        listing = sorted(os.listdir(tmp))
    out = proc.stdout + proc.stderr
    if proc.returncode != 0 or "error" in out.lower() or "warning" in out.lower():
        raise AssertionError(f"ngspice failed (rc={proc.returncode}):\n{out[-3000:]}")
    return proc.stdout, ",".join(listing)


def parse_print_table(stdout: str, columns: int = 3) -> np.ndarray:
    """Rows of the ``.print`` table: lines that start with an integer index (ngspice
    manual, .print)."""
    rows = {}
    for line in stdout.splitlines():
        parts = line.split()
        if len(parts) == columns + 1 and parts[0].isdigit():
            rows[int(parts[0])] = [float(x) for x in parts[1:]]
    return np.array([rows[i] for i in sorted(rows)])


def band_from_table(f_hz: np.ndarray, gain_db: np.ndarray) -> tuple[float, float, float]:
    """Midband gain (dB) and -3 dB crossings nearest the maximum, by linear interpolation
    of dB against log10(f) between table points (nan when there is no crossing)."""
    k = int(np.argmax(gain_db))
    peak = float(gain_db[k])
    level = peak - 20.0 * np.log10(np.sqrt(2.0))

    def crossing(indices):
        prev = k
        for i in indices:
            if gain_db[i] < level:
                x0, x1 = np.log10(f_hz[prev]), np.log10(f_hz[i])
                y0, y1 = gain_db[prev], gain_db[i]
                return float(10 ** (x0 + (level - y0) * (x1 - x0) / (y1 - y0)))
            prev = i
        return float("nan")

    return peak, crossing(range(k - 1, -1, -1)), crossing(range(k + 1, len(f_hz)))
