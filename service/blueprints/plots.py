"""POST /v1/plots/bode.svg and /v1/plots/bode.png: the response curves drawn with matplotlib;
POST /v1/plots/schematic.svg and /v1/plots/schematic.png: the board drawn as a schematic
(``exporters.schematic``).

Body: a design request (as for POST /v1/designs) or ``{"circuit": ..., "target": optional}``
(as for POST /v1/analyses, ``name`` included). Query: ``width_px``, ``height_px``
(``MIN_PX``..``MAX_PX``). The cascade's Vout/Vs is drawn bold, each stage's cumulative output
lighter; the target band and corners carry the SVG ids ``target-band``, ``target-f-low``,
``target-f-high`` (matplotlib's gid) so that portals can restyle them. The schematic's
default size is the drawing's natural size (fitted within ``MAX_PX``); one side given, the
other follows the drawing's aspect ratio.
"""

from __future__ import annotations

import io
import math
import re
import threading

from flask import Blueprint, Response, request
from marshmallow import ValidationError

from service.errors import get_json_body
from service.ops import budget, cost
from service.pipeline import run_analysis, run_design

bp = Blueprint("plots", __name__, url_prefix="/v1/plots")

MIN_PX, MAX_PX = 200, 4000
DEFAULT_WIDTH_PX, DEFAULT_HEIGHT_PX = 900, 600
DPI = 100
CURVE_POINTS = 400


QUERY_PARAMETERS = ("width_px", "height_px")
_ASCII_INT_RE = re.compile(r"[0-9]{1,5}")


def _size(defaults=(DEFAULT_WIDTH_PX, DEFAULT_HEIGHT_PX)) -> tuple[int, int]:
    """The image size from the query; unknown parameters are refused (as on exports).

    Digits are ASCII only: ``str.isdigit`` also accepts superscripts such as "²", which
    ``int()`` then refuses.
    """
    errors = {key: [f"Unknown query parameter; allowed: {', '.join(QUERY_PARAMETERS)}."]
              for key in request.args if key not in QUERY_PARAMETERS}
    sizes = []
    for name, default in zip(("width_px", "height_px"), defaults, strict=True):
        raw = request.args.get(name)
        if raw is None:
            sizes.append(default)
            continue
        if not _ASCII_INT_RE.fullmatch(raw) or not MIN_PX <= int(raw) <= MAX_PX:
            errors[name] = [f"An integer from {MIN_PX} to {MAX_PX} (got {ascii(raw[:20])})."]
            continue
        sizes.append(int(raw))
    if errors:
        raise ValidationError({"query": errors})
    return sizes[0], sizes[1]


def _result_and_target(body) -> tuple[dict, dict | None]:
    if not isinstance(body, dict):
        raise ValidationError({"_schema": ["The body must be a JSON object."]})
    body = dict(body)
    body.setdefault("response", {"points": CURVE_POINTS})
    if "circuit" in body:
        result = run_analysis(body)
        target = result.get("target") or body.get("target")
    else:
        result = run_design(body)
        target = result.get("target")
    return result, target


def _target_gain_db(target: dict) -> float | None:
    if target.get("gain_db") is not None:
        return float(target["gain_db"])
    if target.get("gain") is not None and target["gain"] > 0:
        return 20.0 * math.log10(float(target["gain"]))
    return None


#: matplotlib's rcParams (set by rc_context below) are process-wide: one drawing at a time
#: per worker process, so threads (gthread workers) never see each other's settings.
_RENDER_LOCK = threading.Lock()


def render(result: dict, target: dict | None, *, fmt: str, width_px: int,
           height_px: int) -> bytes:
    """Draw the Bode plot of a design/analysis result; ``fmt`` is "svg" or "png"."""
    with _RENDER_LOCK:
        return _render(result, target, fmt=fmt, width_px=width_px, height_px=height_px)


def _render(result: dict, target: dict | None, *, fmt: str, width_px: int,
            height_px: int) -> bytes:
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    resp = result["response"]
    f = resp["frequency_hz"]
    with matplotlib.rc_context({"svg.hashsalt": "gainchain", "svg.fonttype": "path"}):
        fig = Figure(figsize=(width_px / DPI, height_px / DPI), dpi=DPI)
        FigureCanvasAgg(fig)
        ax_g, ax_p = fig.subplots(2, 1, sharex=True)
        for st in resp["stages"]:
            ax_g.semilogx(f, _num(st["gain_db"]), lw=1.0, alpha=0.55,
                          label=f"stage {st['stage']}", gid=f"stage-{st['stage']}-gain")
            ax_p.semilogx(f, _num(st["phase_deg"]), lw=1.0, alpha=0.55,
                          gid=f"stage-{st['stage']}-phase")
        ax_g.semilogx(f, _num(resp["gain_db"]), lw=2.4, color="black", label="cascade",
                      gid="cascade-gain")
        ax_p.semilogx(f, _num(resp["phase_deg"]), lw=2.4, color="black", gid="cascade-phase")
        if target:
            f_lo = float(target.get("f_low_hz") or 0.0)
            f_hi = float(target["f_high_hz"])
            left = f_lo if f_lo > 0 else f[0]
            ax_g.axvspan(left, f_hi, color="tab:green", alpha=0.12, gid="target-band",
                         label="target band")
            if f_lo > 0:
                ax_g.axvline(f_lo, color="tab:green", ls="--", lw=1.2, gid="target-f-low")
            ax_g.axvline(f_hi, color="tab:green", ls="--", lw=1.2, gid="target-f-high")
            gain_db = _target_gain_db(target)
            if gain_db is not None:
                ax_g.axhline(gain_db, color="tab:green", ls=":", lw=1.0, gid="target-gain")
        ax_g.set_ylabel("gain (dB)")
        ax_p.set_ylabel("phase (deg)")
        ax_p.set_xlabel("frequency (Hz)")
        ax_g.set_xlim(f[0], f[-1])
        for ax in (ax_g, ax_p):
            ax.grid(True, which="both", alpha=0.3)
        ax_g.legend(loc="lower center", fontsize="small")
        fig.tight_layout()
        buf = io.BytesIO()
        if fmt == "svg":
            fig.savefig(buf, format="svg", metadata={"Date": None})
        else:
            fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    return buf.getvalue()


def _num(values):
    return [math.nan if v is None else v for v in values]


def _plot(fmt: str, mimetype: str) -> Response:
    width_px, height_px = _size()
    body = get_json_body()
    cost.charge(cost.plot_units(width_px, height_px), field="query.width_px",
                what=f"A {width_px} x {height_px} px plot")
    result, target = _result_and_target(body)
    budget.check("before drawing the plot")
    data = render(result, target, fmt=fmt, width_px=width_px, height_px=height_px)
    budget.check("drawing the plot")  # a plot finished past the budget is not sent
    return Response(data, status=200, mimetype=mimetype)


@bp.post("/bode.svg")
def bode_svg():
    """Bode plot (SVG) of a design request or a circuit.

    :raise 400: malformed JSON. :raise 415: not JSON. :raise 422: invalid body or size.
    """
    return _plot("svg", "image/svg+xml")


@bp.post("/schematic.svg")
def schematic_svg():
    """Schematic (SVG) of a design request or a circuit.

    :raise 400: malformed JSON. :raise 415: not JSON. :raise 422: invalid body or size.
    """
    return _schematic("svg", "image/svg+xml")


@bp.post("/schematic.png")
def schematic_png():
    """Schematic (PNG) of a design request or a circuit.

    :raise 400: malformed JSON. :raise 415: not JSON. :raise 422: invalid body or size.
    """
    return _schematic("png", "image/png")


def _schematic(fmt: str, mimetype: str) -> Response:
    from exporters.board import build_board
    from exporters.schematic import schematic

    width_px, height_px = _size(defaults=(None, None))
    circuit, name, tolerances = _schematic_circuit(get_json_body())
    board = build_board(circuit, name=name or "", **tolerances)
    data = schematic(board, fmt=fmt, width_px=width_px, height_px=height_px)
    return Response(data, status=200, mimetype=mimetype)


def _schematic_circuit(body):
    """The circuit, name and passive tolerances of a body: a circuit as it is (validated by
    the analysis schema, not analysed) or a design request (designed first)."""
    from schemas.request import AnalysisRequestSchema
    from service.engine.model.circuit import Circuit

    if not isinstance(body, dict):
        raise ValidationError({"_schema": ["The body must be a JSON object."]})
    if "circuit" in body:
        data = AnalysisRequestSchema().load(body)
        return data["circuit"], data.get("name"), {}
    design = run_design(body)
    components = body.get("components") or {}
    tolerances = {key: float(components[key]) for key in
                  ("resistor_tolerance_pct", "capacitor_tolerance_pct") if key in components}
    return Circuit.from_dict(design["circuit"]), body.get("name"), tolerances


@bp.post("/bode.png")
def bode_png():
    """Bode plot (PNG) of a design request or a circuit.

    :raise 400: malformed JSON. :raise 415: not JSON. :raise 422: invalid body or size.
    """
    return _plot("png", "image/png")
