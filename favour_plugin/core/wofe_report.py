"""The HTML report of a posterior job: the prior, the weights, and the conditional-independence checks.

A pure function of the job's lineage record, so the report says exactly
what the lineage holds. Every value is escaped.
"""

from __future__ import annotations

from html import escape

from .lineage import CAUTION

_STYLE = """
body { font-family: sans-serif; margin: 2em; color: #1d2533; max-width: 60em; }
h1 { font-size: 1.4em; } h2 { font-size: 1.1em; margin-top: 1.6em; }
table { border-collapse: collapse; margin: 0.5em 0; }
th, td { border: 1px solid #b8c0cc; padding: 0.25em 0.6em; text-align: right; }
th { background: #e8ecf1; } td.text, th.text { text-align: left; }
.doubtful { background: #f6dccf; } .caution { color: #8a2f1a; margin-top: 2em; }
"""


def _number(value, digits: int = 4) -> str:
    """Format a number for the report ("–" for None)."""
    if value is None:
        return "–"
    if isinstance(value, int):
        return str(value)
    return f"{value:.{digits}g}"


def _row(cells, header: bool = False, css: str = "") -> str:
    tag = "th" if header else "td"
    cls = f' class="{css}"' if css else ""
    return f"<tr{cls}>" + "".join(
        f'<{tag} class="text">{escape(str(c))}</{tag}>' if isinstance(c, str) and i == 0
        else f"<{tag}>{escape(_number(c) if not isinstance(c, str) else c)}</{tag}>"
        for i, c in enumerate(cells)) + "</tr>"


def posterior_report_html(record: dict, names: list[str]) -> str:
    """Return the report of a posterior job as a standalone HTML page.

    Parameters
    ----------
    record : dict
        The job's lineage record (``summary`` holds the prior, the layers'
        weights, the checks and the deposit accounting).
    names : list of str
        The evidence layers' names, in order.
    """
    summary = record["summary"]
    prior = summary["prior"]
    overall = summary["checks"]["overall"]
    pairwise = summary["checks"]["pairwise"]
    deposits = summary["deposits"]
    parts = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>Posterior probability: "
             f"weights of evidence</title><style>{_STYLE}</style></head><body>",
             "<h1>Posterior probability: weights of evidence</h1>",
             f"<p>Favour {escape(record['tool']['version'])}, {escape(record['created'])}. "
             f"Unit cell {_number(record['parameters']['unit_area_km2'])} km²; "
             f"s(P) from s(logit) by the {escape(record['parameters']['s_p_rule'])} rule.</p>",
             "<h2>Study area and prior</h2><table>",
             _row(["", "value"], header=True),
             _row(["area (unit cells)", prior["area_units"]]),
             _row(["deposit cells", prior["deposits"]]),
             _row(["prior probability per unit cell", prior["probability"]]),
             _row(["prior logit", prior["logit"]]),
             _row(["deposit points read", deposits["points"]]),
             _row(["points outside the grid (not counted)", deposits["outside_grid"]]),
             "</table>"]
    parts.append("<h2>Weights per layer and class</h2><table>")
    parts.append(_row(["layer", "class", "weight", "s(weight)", "share of known area"], header=True))
    for layer in summary["layers"]:
        for k, cls in enumerate(layer["classes"]):
            parts.append(_row([layer["name"], cls, layer["weights"][k], layer["s_weights"][k],
                               layer["fractions"][k]]))
    parts.append("</table>")
    css = "doubtful" if overall["flag"] else ""
    parts.append("<h2>Conditional independence: observed against predicted deposits</h2><table>")
    parts.append(_row(["", "value"], header=True))
    for label, key in (("observed deposits n", "observed"), ("predicted deposits T = Σ N·P", "predicted"),
                       ("n / T (below 0.85 is a warning sign)", "ratio"), ("s(T)", "s_predicted"),
                       ("(T − n) / s(T)", "z"), ("one-tailed p (Agterberg & Cheng 2002)", "p_value")):
        parts.append(_row([label, overall[key]], css=css if key in ("ratio", "p_value") else ""))
    parts.append("</table>")
    if overall["note"]:
        parts.append(f"<p class='caution'>{escape(overall['note'])}</p>")
    parts.append("<h2>Pairwise chi-square on deposit counts (p-values)</h2><table>")
    parts.append(_row(["", *names], header=True))
    lookup = {(p["layer_a"], p["layer_b"]): p for p in pairwise}
    for a in names:
        cells: list = [a]
        for b in names:
            pair = lookup.get((a, b)) or lookup.get((b, a))
            if a == b or pair is None:
                cells.append("")
            elif pair["p_value"] is None:
                cells.append("undefined")
            else:
                cells.append(f"χ² {pair['chi2']:.3g}, p {pair['p_value']:.3g}"
                             + (" (small counts)" if pair["flag"] else ""))
        parts.append(_row(cells))
    parts.append("</table>")
    notes = [p for p in pairwise if p["note"]]
    if notes:
        parts.append("<ul>" + "".join(f"<li>{escape(p['layer_a'])} × {escape(p['layer_b'])}: "
                                      f"{escape(p['note'])}</li>" for p in notes) + "</ul>")
    if record.get("warnings"):
        parts.append("<h2>Warnings</h2><ul>" + "".join(
            f"<li>{escape(w['message'])}</li>" for w in record["warnings"]) + "</ul>")
    parts.append(f"<p class='caution'>{escape(CAUTION)} Posterior probabilities rest on the known "
                 "deposits and on conditional independence of the evidence; read them with the checks "
                 "above.</p></body></html>")
    return "\n".join(parts)
