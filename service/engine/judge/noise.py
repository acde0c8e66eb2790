"""Output noise of the circuit model from the MNA adjoint solve.

Sources (all uncorrelated, so their power spectral densities add at the output):

* thermal noise of every resistor, source impedance and load included: a current source of
  PSD ``4 k T / R`` (A^2/Hz) across the resistor (Johnson-Nyquist; ``k`` the Boltzmann
  constant, exact in the 2019 SI);
* every op-amp unit (the bias follower included): a voltage ``e_n`` (V/sqrt(Hz)) in series
  with its + input and a current ``i_n`` (A/sqrt(Hz)) into each input, uncorrelated.

With the adjoint solution ``y`` (``M^T y = c``, see :mod:`service.engine.solver.mna`) the output PSD
of a current ``J`` between nodes a and b is ``|y_a - y_b|^2 S_J``, and of a voltage ``e`` in
series with a unit's + input ``|y_row|^2 S_e``. One batched solve gives every contribution.

Integrated noise: ``v_rms = sqrt(integral S(f) df)``, computed as ``integral S(f) f d(ln f)``
by Simpson's rule on a log grid (``INTEGRATION_POINTS_PER_DECADE``), with the band edges
inserted into the grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import simpson

from service.engine.model.circuit import Circuit
from service.engine.solver.corners import F_MAX_HZ, F_MIN_HZ
from service.engine.solver.mna import GND, MnaSystem, build

#: Boltzmann constant in J/K (exact by the 2019 SI definition; tests compare it with
#: ``scipy.constants.k``).
BOLTZMANN_J_PER_K = 1.380649e-23
DEFAULT_TEMPERATURE_K = 300.0
#: The integrand ``S(f) f`` is smooth in ln f; 20 points per decade with Simpson's rule
#: integrates single-pole roll-offs to far better than 0.1 %.
INTEGRATION_POINTS_PER_DECADE = 20
#: Every second integration point is reported: 10 points per decade.
REPORT_EVERY = 2


@dataclass(frozen=True)
class NoiseSpectrum:
    """Output noise PSD (V^2/Hz) at ``frequency_hz``: total and per group.

    Groups: ``"source"``, ``"stage1"`` .. ``"stageN"``, ``"load"``, ``"bias"`` (see
    :func:`service.engine.solver.mna.build`). ``by_source`` maps each resistor or op-amp noise
    term (``"R_feedback1"``, ``"U1.en"``, ``"U1.in+"``) to its PSD.
    """

    frequency_hz: np.ndarray
    total_v2_per_hz: np.ndarray
    by_group: dict
    by_source: dict


def output_noise(circuit: Circuit, f_hz, *, temperature_k: float = DEFAULT_TEMPERATURE_K,
                 system: MnaSystem | None = None) -> NoiseSpectrum:
    """Output noise PSD of the circuit at the frequencies ``f_hz`` (1-D, Hz)."""
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    system = system or build(circuit)
    y = system.adjoint(f)
    zero = np.zeros(f.size, dtype=complex)

    def at(node):
        return zero if node == GND else y[:, system.nodes[node]]

    by_source: dict = {}
    by_group = {g: np.zeros(f.size) for g in system.groups}
    four_kt = 4.0 * BOLTZMANN_J_PER_K * temperature_k
    for r in system.resistors:
        psd = four_kt / r.r_ohm * np.abs(at(r.a) - at(r.b)) ** 2  # Johnson-Nyquist, 4kT/R
        by_source[r.name] = psd
        by_group[r.group] = by_group[r.group] + psd
    en2 = system.en_v_per_rthz ** 2
    in2 = system.in_a_per_rthz ** 2
    for unit in system.units:
        terms = {f"{unit.name}.en": en2 * np.abs(y[:, system.rows[unit.name]]) ** 2}
        if in2 > 0.0:
            terms[f"{unit.name}.in+"] = in2 * np.abs(at(unit.plus)) ** 2
            terms[f"{unit.name}.in-"] = in2 * np.abs(at(unit.minus)) ** 2
        for name, psd in terms.items():
            by_source[name] = psd
            by_group[unit.group] = by_group[unit.group] + psd
    total = sum(by_group.values())
    return NoiseSpectrum(frequency_hz=f, total_v2_per_hz=total, by_group=by_group,
                         by_source=by_source)


def integration_grid(edges=(), f_min_hz: float = F_MIN_HZ, f_max_hz: float = F_MAX_HZ,
                     per_decade: int = INTEGRATION_POINTS_PER_DECADE) -> np.ndarray:
    """Log grid over ``f_min..f_max`` with the finite ``edges`` inside it inserted."""
    count = int(round((math.log10(f_max_hz) - math.log10(f_min_hz)) * per_decade)) + 1
    grid = np.logspace(math.log10(f_min_hz), math.log10(f_max_hz), count)
    extra = [e for e in edges if e is not None and math.isfinite(e) and f_min_hz < e < f_max_hz]
    return np.unique(np.concatenate([grid, np.asarray(extra, dtype=float)]))


def integrate_psd(f_hz: np.ndarray, psd: np.ndarray, f_lo_hz: float, f_hi_hz: float):
    """``integral_{f_lo}^{f_hi} S(f) df`` by Simpson's rule in ln f over the grid points
    that lie inside ``[f_lo, f_hi]`` (include the edges in the grid for an exact span).

    ``psd`` of shape ``(F,)`` gives a float; ``(K, F)`` gives K integrals in one pass of
    scipy's rule (row by row the same arithmetic)."""
    mask = (f_hz >= f_lo_hz * (1 - 1e-12)) & (f_hz <= f_hi_hz * (1 + 1e-12))
    psd = np.asarray(psd)
    if mask.sum() < 2:
        return 0.0 if psd.ndim == 1 else np.zeros(psd.shape[0])
    x = np.log(f_hz[mask])
    out = simpson(psd[..., mask] * f_hz[mask], x=x, axis=-1)
    return float(out) if psd.ndim == 1 else out


def rms_over(circuit: Circuit, f_lo_hz: float, f_hi_hz: float, *,
             temperature_k: float = DEFAULT_TEMPERATURE_K) -> float:
    """RMS output noise (V) from ``f_lo`` to ``f_hi`` (log grid, Simpson)."""
    f = integration_grid((), f_lo_hz, f_hi_hz)
    spec = output_noise(circuit, f, temperature_k=temperature_k)
    return math.sqrt(integrate_psd(f, spec.total_v2_per_hz, f_lo_hz, f_hi_hz))


def noise_block(circuit: Circuit, *, as_built: dict, input_peak_v: float | None,
                temperature_k: float = DEFAULT_TEMPERATURE_K) -> dict:
    """The response's ``noise`` block (JSON-ready; non-finite values become null later).

    ``band_hz`` is the as-built ``[f_low, f_high]`` (``f_low`` null when DC coupled: the band
    then starts at 1 mHz, the bottom of the model's search range). ``stages`` gives each
    stage's share of the band output noise *power* (its resistors and its op-amp unit);
    ``other`` does the same for the source impedance, the load and the bias network.
    """
    f_low = as_built.get("f_low_hz")
    f_high = as_built.get("f_high_hz")
    gain = as_built.get("gain")
    band_lo = f_low if _finite(f_low) else F_MIN_HZ
    band_hi = f_high if _finite(f_high) else F_MAX_HZ
    f = integration_grid((band_lo, band_hi))
    spec = output_noise(circuit, f, temperature_k=temperature_k)
    full_v2 = integrate_psd(f, spec.total_v2_per_hz, F_MIN_HZ, F_MAX_HZ)
    names = list(spec.by_group)
    # the band total and every group's share in one pass
    band = integrate_psd(f, np.stack([spec.total_v2_per_hz] + [spec.by_group[g] for g in names]),
                         band_lo, band_hi)
    band_v2 = float(band[0])
    group_v2 = {g: float(v) for g, v in zip(names, band[1:], strict=True)}
    band_rms = math.sqrt(band_v2)

    def share(g):
        return group_v2[g] / band_v2 if band_v2 > 0 else float("nan")

    stages = [{"stage": k, "output_rms_v": math.sqrt(group_v2[f"stage{k}"]),
               "share": share(f"stage{k}")} for k in range(1, circuit.n_stages + 1)]
    other = {g: {"output_rms_v": math.sqrt(group_v2[g]), "share": share(g)}
             for g in ("source", "load", "bias") if g in group_v2}
    # Report on the regular log grid only (10 points per decade).
    regular = np.isin(f, np.logspace(-3, 10, 13 * INTEGRATION_POINTS_PER_DECADE + 1))
    report = np.flatnonzero(regular)[::REPORT_EVERY]
    input_rms = band_rms / gain if _finite(gain) and gain > 0 else float("nan")
    if input_peak_v is not None and _finite(gain) and band_rms > 0:
        signal_rms = input_peak_v * gain / math.sqrt(2.0)  # sine: rms = peak / sqrt(2)
        snr_db = 20.0 * math.log10(signal_rms / band_rms)
    else:
        snr_db = None
    return {
        "temperature_k": temperature_k,
        "band_hz": [f_low if _finite(f_low) else None, f_high],
        "output_density": {
            "frequency_hz": f[report].tolist(),
            "v_per_rthz": np.sqrt(spec.total_v2_per_hz[report]).tolist(),
        },
        "output_rms_v": {"band": band_rms, "full": math.sqrt(full_v2)},
        "input_rms_v": input_rms,
        "snr_db": snr_db,
        "stages": stages,
        "other": other,
        "model": ("thermal 4kTR of every resistor (source and load included) and each "
                  "op-amp unit's en and in (bias follower included), uncorrelated, by "
                  "modified nodal analysis of the circuit model; rms by Simpson's rule on "
                  f"a {INTEGRATION_POINTS_PER_DECADE}-per-decade log grid; full band "
                  "1 mHz to 10 GHz"),
    }


def _finite(x) -> bool:
    return x is not None and isinstance(x, int | float | np.floating) and math.isfinite(x)
