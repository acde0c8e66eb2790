"""Placeholder: the analyses work fills this in (noise, supply rejection, tolerance, response).

``extra_blocks(circuit, *, target, input_peak_v, as_built, options) -> dict``
"""


def extra_blocks(circuit, *, target, input_peak_v, as_built, options) -> dict:
    return {}
