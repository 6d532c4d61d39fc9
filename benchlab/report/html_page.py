"""The report's HTML page: every piece of text escaped, styles inline, figures as PNG files beside it."""

from __future__ import annotations

import html
import math
from typing import Any, Iterable, Sequence

from benchlab.library import PartRecord

BENCH_CAUTIONS = (
    "Parts under test and their heat sinks get hot: let them cool before handling, and keep the dissipation "
    "within the part's safe operating area.",
    "Switch the supply off before rewiring the fixture; a powered part can be damaged (or damage the bench) "
    "when a lead is moved.",
    "The numbers here are estimates from bench measurements of individual parts. Local electrical codes, the "
    "part makers' ratings and licensed practice take precedence over anything in this report.",
)

_STYLE = """
body { font-family: sans-serif; margin: 2em; color: #222; max-width: 1100px; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 1.6em; border-bottom: 1px solid #ccc; }
table { border-collapse: collapse; font-size: 0.85em; }
th, td { border: 1px solid #ccc; padding: 2px 6px; text-align: right; }
th { background: #eee; } td.t { text-align: left; }
tr.rejected td { color: #999; } tr.chosen td { background: #fff6d5; }
img { max-width: 100%; border: 1px solid #ddd; margin: 0.5em 0; }
.caution { background: #fff1f0; border-left: 4px solid #c0392b; padding: 0.5em 1em; }
.meta { color: #555; font-size: 0.9em; }
"""


# SI units of the numbers a sink design records (keys of benchlab.design's result); others are shown bare.
# Drifts are relative current changes per kelvin (benchlab.design.sink: "drifts relative"), hence 1/K.
UNITS = {"supply": "V", "i_target": "A", "r_exact": "ohm", "r_chosen": "ohm", "source_resistor": "ohm", "vg": "V",
         "vgs": "V", "i_ref": "A", "load_voltage": "V", "compliance_margin": "V", "p_ref": "W", "p_resistor": "W",
         "di_ref_dvsupply": "A/V", "drift_ref_per_k": "1/K", "vth_tempco": "V/K", "i_out": "A", "v_compliance": "V",
         "p_part": "W", "p_source_resistor": "W", "drift_per_k": "1/K", "di_dvsupply": "A/V", "tc_fixed_vgs": "1/K"}


def _key(name: str) -> str:
    return f"{name} ({UNITS[name]})" if name in UNITS else name


def esc(value: Any) -> str:
    """Text made safe for HTML content and attribute values."""
    return html.escape("" if value is None else str(value), quote=True)


def _num(value: float | None, fmt: str = ".4g") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    return format(value, fmt)


def parts_table(parts: Sequence[PartRecord], chosen: Iterable[str]) -> str:
    """The parts of the lot, one row each, the chosen ones highlighted."""
    chosen = set(chosen)
    head = ("Part", "Lot", "State", "Sweep", "Model", "Vth (V)", "&sigma; Vth", "KP (A/V&sup2;)", "&sigma; KP",
            "gm (A/V)", "THETA (1/V)", "Flags / reason")
    rows = ["<table><tr>" + "".join(f"<th>{h}</th>" for h in head) + "</tr>"]
    for p in parts:
        prm = p.params
        classes = " ".join(c for c in ("rejected" if p.state == "rejected" else "",
                                       "chosen" if p.label in chosen else "") if c)
        note = p.reason if p.state == "rejected" else ", ".join(p.flags)
        cells = [
            f'<td class="t">{esc(p.label)}</td>', f'<td class="t">{esc(p.lot)}</td>',
            f'<td class="t">{esc(p.state)}</td>', f'<td class="t">{esc(p.classification or "-")}</td>',
            f'<td class="t">{esc(prm.model if prm else "-")}</td>',
            f"<td>{_num(prm.vth if prm else None, '.4f')}</td>", f"<td>{_num(p.stderr.get('vth'), '.2g')}</td>",
            f"<td>{_num(prm.kp if prm and prm.model != 'linear' else None)}</td>",
            f"<td>{_num(p.stderr.get('kp'), '.2g')}</td>",
            f"<td>{_num(prm.gm if prm and prm.model == 'linear' else None)}</td>",
            f"<td>{_num(prm.theta if prm and prm.theta else None, '.3g')}</td>",
            f'<td class="t">{esc(note)}</td>',
        ]
        rows.append(f'<tr class="{classes}">' + "".join(cells) + "</tr>")
    rows.append("</table>")
    return "\n".join(rows)


def design_section(design: dict, figure_names: dict[str, str]) -> str:
    """Summary of the design's numbers (whatever it recorded) and its outputs."""
    out = [f"<h2>Design {esc(design.get('design_id'))}</h2>",
           f'<p class="meta">recorded {esc(design.get("recorded_at"))}; parts: '
           + esc(", ".join(f"{p['lot']}/{p['label']} ({p['state']})" for p in design.get("recorded_parts", [])))
           + "</p>"]
    scalars = [(k, v) for k, v in design.items()
               if isinstance(v, (int, float, str)) and not isinstance(v, bool)
               and k not in ("design_id", "recorded_at")]
    if scalars:
        out.append("<table>" + "".join(f'<tr><td class="t">{esc(_key(k))}</td><td class="t">{esc(_fmt(v))}</td></tr>'
                                       for k, v in scalars) + "</table>")
    outputs = design.get("outputs")
    if isinstance(outputs, list) and outputs and all(isinstance(o, dict) for o in outputs):
        keys = [k for k in outputs[0] if not isinstance(outputs[0][k], (dict, list))]
        out.append("<h3>Outputs</h3><table><tr>" + "".join(f"<th>{esc(_key(k))}</th>" for k in keys) + "</tr>")
        for o in outputs:
            out.append("<tr>" + "".join(f'<td class="t">{esc(_fmt(o.get(k)))}</td>' for k in keys) + "</tr>")
        out.append("</table>")
    monte_carlo = design.get("monte_carlo")
    if isinstance(monte_carlo, dict):
        out.append(monte_carlo_section(monte_carlo))
    if "operating_point" in figure_names:
        out.append(f'<img src="{esc(figure_names["operating_point"])}" alt="operating point of the reference part">')
    return "\n".join(out)


def monte_carlo_section(mc: dict) -> str:
    """The spread of the design's Monte Carlo run: one row per statistic that has mean / std / 95 % band."""
    rows = []

    def add(name: str, stats: Any) -> None:
        if isinstance(stats, dict) and "mean" in stats:
            cells = [stats.get(k) for k in ("mean", "std", "p2_5", "p97_5")]
            rows.append(f'<tr><td class="t">{esc(name)}</td>' + "".join(f"<td>{_num(c, '.5g')}</td>" for c in cells)
                        + "</tr>")

    add("i_ref (A)", mc.get("i_ref"))
    for output in mc.get("outputs") or []:
        if isinstance(output, dict):
            add(f"{output.get('part', '?')} i_out (A)", output.get("i_out"))
            add(f"{output.get('part', '?')} error", output.get("error"))
    head = (f"<h3>Monte Carlo: {esc(mc.get('samples'))} samples, seed {esc(mc.get('seed'))}, resistor tolerance "
            f"{esc(mc.get('resistor_tolerance'))}</h3>")
    return head + ("<table><tr><th>quantity</th><th>mean</th><th>std</th><th>2.5 %</th><th>97.5 %</th></tr>"
                   + "".join(rows) + "</table>" if rows else "<p>no statistics recorded</p>")


def _fmt(value: Any) -> str:
    return format(value, ".6g") if isinstance(value, float) else str(value)


def cautions_section(design_cautions: Sequence[str]) -> str:
    """The design's own cautions first, then the bench cautions every report carries."""
    items = [*design_cautions, *BENCH_CAUTIONS]
    return ('<h2>Cautions</h2><div class="caution"><ul>' + "".join(f"<li>{esc(c)}</li>" for c in items)
            + "</ul></div>")


def page(title: str, meta: str, body_parts: Sequence[str]) -> str:
    """The whole document."""
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>{esc(title)}</title><style>{_STYLE}</style></head><body>\n"
            f"<h1>{esc(title)}</h1><p class=\"meta\">{esc(meta)}</p>\n" + "\n".join(body_parts) + "\n</body></html>\n")
