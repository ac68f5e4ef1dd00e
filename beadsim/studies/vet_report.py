"""Figures, JSON and the self-contained HTML report of ``beadsim vet``.

The HTML file needs nothing but itself: figures are embedded as base64 PNG, the style sheet is inline
and plain (it prints on A4 without the screen margins), and there are no scripts or external links.
The JSON file holds every number the report shows, and more (the scans and curves behind each figure).
"""

import base64
import html
import json
import logging
import math
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ..io._atomic import replacing
from .figures import _axes, _save
from .sweep import _json_default

logger = logging.getLogger(__name__)

REPORT_HTML = "vet_report.html"
REPORT_JSON = "vet_report.json"

STYLE = """
body { font: 15px/1.45 "DejaVu Serif", Georgia, serif; color: #161616; max-width: 62rem; margin: 1.5rem auto;
       padding: 0 1rem; }
h1 { font-size: 1.55rem; margin-bottom: .2rem; } h2 { font-size: 1.2rem; margin-top: 2rem;
     border-bottom: 2px solid #161616; } h3 { font-size: 1.02rem; }
.byline { color: #555; margin-top: 0; }
.outcome { border: 2px solid #161616; padding: .5rem .9rem; margin: 1rem 0; }
.outcome.bad { border-color: #8a1c1c; }
table { border-collapse: collapse; width: 100%; font-size: .9rem; }
th, td { text-align: left; vertical-align: top; padding: .28rem .45rem; border-top: 1px solid #b9b9b9; }
th { border-top: 2px solid #161616; }
td.num { white-space: nowrap; font-family: "DejaVu Sans Mono", monospace; font-size: .85rem; }
.unit { display: block; max-width: 9rem; white-space: normal; font: .75rem "DejaVu Serif", Georgia, serif;
        color: #444; }
.st { font-weight: bold; text-transform: uppercase; font-size: .78rem; letter-spacing: .04em; }
.st-fail { color: #8a1c1c; } .st-pass { color: #1f5c2e; } .st-note, .st-skipped { color: #5a5a5a; }
figure { margin: 1rem 0; break-inside: avoid; } figure img { max-width: 100%; height: auto; }
figcaption { font-size: .85rem; color: #333; }
.small { font-size: .85rem; color: #444; }
@media print { body { max-width: none; margin: 0; font-size: 11pt; } h2 { break-after: avoid; } }
"""


# ------------------------------------------------------------------------------------------ figures

def _timestep_figures(scan, folder):
    rows = scan["scan"]
    fig, ax = _axes((6.0, 3.6))
    for row in rows:
        if len(row["times"]) > 1:
            dev = np.abs(np.asarray(row["energy"]))
            ax.plot(row["times"], np.maximum(dev, 1e-12), lw=1, label=f"dt = {row['timestep']:g}"
                    + ("" if row["stable"] else " (unstable)"))
    ax.set_yscale("log")
    ax.set_xlabel("time [tau]")
    ax.set_ylabel("|E(t) - E(0)| per bead [kT]")
    ax.legend(fontsize=6, ncol=2)
    energy = _save(fig, folder / "timestep_energy.png")[0]

    fig = Figure(figsize=(5.6, 5.4))
    done = [r for r in rows if r["drift"] is not None]
    dts = np.array([r["timestep"] for r in done])
    stable = np.array([r["stable"] for r in done], dtype=bool)
    panels = ((fig.add_subplot(2, 1, 1), [max(abs(r["drift"]), 1e-12) for r in done],
               [r["drift_error"] or 0.0 for r in done], scan["drift_limit"], "|dE/dt| per bead [kT/tau]"),
              (fig.add_subplot(2, 1, 2), [max(r["fluctuation_ratio"], 1e-12) for r in done], None,
               scan["fluctuation_limit"], "rms(E) / rms(K)"))
    for ax, values, errors, limit, label in panels:
        values = np.asarray(values)
        if stable.any():
            ax.errorbar(dts[stable], values[stable], yerr=None if errors is None else np.asarray(errors)[stable],
                        fmt="o", color="C0", label="stable")
        if (~stable).any():
            ax.plot(dts[~stable], values[~stable], "x", color="C3", ms=8, label="unstable")
        ax.axhline(limit, color="k", ls="--", lw=0.8, label=f"limit {limit:g}")
        ax.axvline(scan["model_timestep"], color="C1", lw=1, label=f"model dt = {scan['model_timestep']:g}")
        if scan["suggested"]:
            ax.axvline(scan["suggested"], color="C2", ls=":", lw=1.2, label=f"suggested {scan['suggested']:g}")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_ylabel(label)
    panels[0][0].legend(fontsize=7)
    panels[1][0].set_xlabel("timestep [tau]")
    return {"timestep_energy": energy, "timestep_drift": _save(fig, folder / "timestep_drift.png")[0]}


def _table_figure(rep, path):
    r, u, f = (np.asarray(rep[k]) for k in ("r", "u", "f"))
    acc = np.asarray(rep["accessible"], dtype=bool)
    fig = Figure(figsize=(6.0, 4.6))
    top, bottom = fig.add_subplot(2, 1, 1), fig.add_subplot(2, 1, 2, sharex=None)
    for ax, y, label in ((top, u, "U [epsilon]"), (bottom, f, "F = -dU/dr [epsilon/sigma]")):
        ax.plot(r, y, color="C0", lw=1.2)
        lo, hi = np.min(y[acc]), np.max(y[acc])
        pad = 0.1 * (hi - lo or 1.0)
        ax.set_ylim(lo - pad, hi + pad)
        ax.set_ylabel(label)
        ax.axvline(rep["jump_at"], color="C3", lw=0.8, ls=":")
    bottom.set_xlabel(f"r [sigma]; dotted: largest departure from smoothness ({rep['largest_jump']:.2g} kT)")
    top.set_title(f"{rep['kind']} table {Path(rep['path']).name} (rows within 30 kT of the minimum)", fontsize=9)
    return _save(fig, path)[0]


def _crossing_figure(res, path):
    fig, ax = _axes((5.4, 3.6))
    ax.plot(res["l"], res["energy"], color="C0")
    ax.axhline(res["threshold"], color="k", ls="--", lw=0.8, label=f"threshold {res['threshold']:g} kT")
    ax.plot([res["bond_length"]], [res["barrier"]], "o", color="C3", label=f"barrier {res['barrier']:.3g} kT")
    finite = np.asarray(res["energy"], dtype=float)
    finite = finite[np.isfinite(finite)]
    ax.set_ylim(min(0.0, finite.min()) - 1, max(res["threshold"] * 3, res["barrier"] * 2))
    ax.set_xlabel("bond length l at the crossing [sigma]")
    ax.set_ylabel("crossing energy [kT]")
    ax.legend(fontsize=8)
    return _save(fig, path)[0]


def _internal_figure(sol, path):
    s = np.asarray(sol["internal_s"])
    r2 = np.asarray(sol["internal_r2"])
    fig, ax = _axes((5.4, 3.6))
    ax.plot(s, r2 / s, "o-", ms=3, color="C0", label="<R^2(s)>/s")
    n = sol["n_beads"]
    ax.axvspan(3, n / 2, color="0.9", zorder=0, label="fit window 3 <= s <= N/2")
    ax.set_xscale("log")
    ax.set_xlabel("backbone separation s")
    ax.set_ylabel("<R^2(s)>/s [sigma^2]")
    ax.set_title("flat: ideal (theta); rising: good solvent; falling: poor solvent", fontsize=8)
    ax.legend(fontsize=8)
    return _save(fig, path)[0]


def _distribution_figure(d, kind, path):
    fig, ax = _axes((5.4, 3.6))
    edges = np.asarray(d["edges"])
    ax.stairs(d["histogram"], edges, color="C0", label=f"simulated ({d['samples']} samples)")
    ax.plot(d["target_x"], d["target_p"], color="C3", lw=1.2, label="target")
    lo, hi = edges[0], edges[-1]
    pad = 0.3 * (hi - lo)
    ax.set_xlim(max(lo - pad, d["target_x"][0]), min(hi + pad, d["target_x"][-1]))
    ax.set_xlabel("bond length [sigma]" if kind == "bond" else "bead angle [degrees, 180 = straight]")
    ax.set_ylabel("probability density")
    ax.legend(fontsize=8)
    return _save(fig, path)[0]


def draw_figures(numbers, folder):
    """Draw every figure the numbers allow into ``folder``; return ``{name: path}`` of the PNG files."""
    folder = Path(folder)
    out = {}
    if "timestep" in numbers:
        out.update(_timestep_figures(numbers["timestep"], folder))
    for kind, rep in numbers.get("tables", {}).items():
        out[f"table_{kind}"] = _table_figure(rep, folder / f"table_{kind}.png")
    if "crossing" in numbers:
        out["crossing"] = _crossing_figure(numbers["crossing"], folder / "crossing_barrier.png")
    if "internal_s" in numbers.get("solvent", {}):
        out["internal_distances"] = _internal_figure(numbers["solvent"], folder / "internal_distances.png")
    for kind, d in numbers.get("structure", {}).items():
        out[f"{kind}_distribution"] = _distribution_figure(d, kind, folder / f"{kind}_distribution.png")
    return {name: Path(p) for name, p in out.items()}


# ------------------------------------------------------------------------------------------ HTML

def _esc(text):
    return html.escape(str(text))


def _number(value, error=None, unit=""):
    if value is None:
        return "-"
    if isinstance(value, float) and not math.isfinite(value):
        return "n/a"
    text = f"{value:.4g}"
    if error is not None and isinstance(error, float) and math.isfinite(error):
        text += f" &plusmn; {error:.2g}"
    return text + (f"<span class='unit'>{_esc(unit)}</span>" if unit else "")


def _figure(path, caption):
    data = base64.b64encode(Path(path).read_bytes()).decode("ascii")
    return (f'<figure><img alt="{_esc(caption)}" src="data:image/png;base64,{data}">'
            f"<figcaption>{_esc(caption)}</figcaption></figure>")


CAPTIONS = {
    "timestep_energy": "Velocity Verlet without thermostat from one equilibrated state: total-energy deviation per bead.",
    "timestep_drift": ("Energy drift per bead (top) and total-energy fluctuations relative to kinetic ones "
                       "(bottom) against the timestep; a timestep is stable below both dashed limits."),
    "table_bond": "Bond table: energy and force rows.",
    "table_pair": "Pair table: energy and force rows.",
    "crossing": "Energy of two bonds crossing at their midpoints against the bond length, in kT.",
    "internal_distances": "Internal distances at the model's temperature.",
    "bond_distribution": "Bond-length distribution against the target.",
    "angle_distribution": "Bead-angle distribution against the target.",
}

SECTIONS = (
    ("Numerical soundness", ("timestep", "largest_stable_timestep", "force_gradient", "bond_table", "pair_table",
                             "crossing_barrier"),
     ("timestep_energy", "timestep_drift", "table_bond", "table_pair", "crossing")),
    ("Structure", ("structure", "bond_distribution", "angle_distribution"), ("bond_distribution", "angle_distribution")),
    ("Solvent quality at the model's temperature", ("solvent_quality", "size_ratio"), ("internal_distances",)),
    ("Theta point and collapse", ("theta",), ()),
    ("Production run", ("production_time",), ()),
)


def _exactness(v):
    """Say so when a pass/fail number carries no sampling error (computed from the potentials or a fixed scan)."""
    if v["status"] in ("pass", "fail") and v["error"] is None:
        return "<span class='unit'>deterministic: no sampling error</span>"
    return ""


def _verdict_rows(verdicts):
    rows = [("<table><tr><th>check</th><th>result</th><th>value</th><th>threshold</th><th>basis</th>"
            "<th>what it means</th></tr>")]
    for v in verdicts:
        rows.append(f"<tr><td>{_esc(v['title'])}</td><td class='st st-{v['status']}'>{_esc(v['status'])}</td>"
                    f"<td class='num'>{_number(v['value'], v['error'], v['unit'])}{_exactness(v)}</td>"
                    f"<td>{_esc(v['threshold'])}</td>"
                    f"<td class='small'>{_esc(v['basis'])}</td><td>{_esc(v['message'])}</td></tr>")
    rows.append("</table>")
    return "\n".join(rows)


def _theta_details(theta):
    if not theta or "estimates" not in theta:
        return ""
    parts = [("<h3>Estimators side by side</h3><table><tr><th>estimator</th><th>value</th><th>fitted on</th>"
             "<th>note</th></tr>")]
    for e in theta["estimates"]:
        parts.append(f"<tr><td>{_esc(e['method'])}</td><td class='num'>{_number(e['value'], e['error'])}</td>"
                     f"<td class='small'>{_esc(e['fitted_on'])}</td><td class='small'>{_esc(e['note'])}</td></tr>")
    parts.append("</table>")
    if theta.get("collapse"):
        parts.append("<h3>Coil-globule transition</h3><ul>"
                     + "".join(f"<li class='small'>{_esc(line)}</li>" for line in theta["collapse"]) + "</ul>")
    plan = theta["plan"]
    parts.append(f"<p class='small'>Sweep: chain lengths {plan['chain_lengths']}, temperatures {plan['temperatures']}, "
                 f"{plan['replicas']} replica(s), {plan['production_steps']} production steps per point at "
                 f"timestep {plan['timestep']:g} tau, {plan['workers']} worker(s), {plan.get('wall_seconds', '-')} s. "
                 "Longer chains and runs narrow the estimate: raise --budget.</p>")
    return "\n".join(parts)


def render_html(report):
    """The report as one self-contained HTML page (str)."""
    verdicts = report["verdicts"]
    problems = [v for v in verdicts if v["status"] == "fail"]
    figures = {name: Path(p) for name, p in report["figures"].items()}
    machine = report["machine"]["description"]
    parts = ["<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
             f"<title>beadsim vet: {_esc(Path(report['model']).name)}</title><style>{STYLE}</style></head><body>",
             f"<h1>Model vetting report: {_esc(Path(report['model']).name)}</h1>",
             (f"<p class='byline'>beadsim vet{' --fast' if report['fast'] else ''}, budget {report['budget_minutes']:g} "
             f"min, {report['wall_seconds']:g} s on {_esc(machine['cpu_model'])} ({machine['nproc']} cores, load "
             f"average {machine['load_average_1_5_15'][0]:.2f} at the start, "
             f"{report['machine']['load_average_at_end'][0]:.2f} at the end)</p>")]
    if problems:
        parts.append("<div class='outcome bad'><strong>Problems found: " + str(len(problems)) + "</strong><ul>"
                     + "".join(f"<li>{_esc(v['title'])}: {_esc(v['message'])}</li>" for v in problems)
                     + "</ul></div>")
    else:
        parts.append("<div class='outcome'><strong>No problems found</strong> by the checks below.</div>")
    note = report["numbers"].get("dynamics_timestep_note")
    if note:
        parts.append(f"<p class='small'>Note: {_esc(note)}.</p>")
    used = set()
    for title, prefixes, figure_names in SECTIONS:
        chosen = [v for v in verdicts if v["key"] not in used and v["key"].startswith(prefixes)]
        used.update(v["key"] for v in chosen)
        parts.append(f"<h2>{_esc(title)}</h2>")
        if chosen:
            parts.append(_verdict_rows(chosen))
        for name in figure_names:
            if name in figures:
                parts.append(_figure(figures[name], CAPTIONS[name]))
        if title.startswith("Theta"):
            parts.append(_theta_details(report["numbers"].get("theta")))
            for name in sorted(n for n in figures if n.startswith("sweep_")):
                parts.append(_figure(figures[name], f"Sweep: {name[len('sweep_'):].replace('_', ' ')}."))
    parts.append("<h2>About the thresholds</h2><p class='small'>Each verdict names the basis of its threshold: "
                 "exact results, our own choice (a stated, adjustable pass mark), or a rule of thumb in common "
                 "practice. Rules of thumb are guides, not laws: the bond-crossing threshold of 20 kT is the lower "
                 "end of the 20-70 kT quoted for entangled melts (FENE with WCA beads at kT = 1, Kremer and Grest, "
                 "J. Chem. Phys. 92, 5057, 1990, has about 70 kT). Every number shown here, and the curves behind "
                 f"the figures, are in {REPORT_JSON} beside this file.</p></body></html>")
    return "\n".join(parts)


def write_report(report, out):
    """Write ``vet_report.json`` and ``vet_report.html`` into ``out`` (each atomically)."""
    out = Path(out)
    for name, text in ((REPORT_JSON, json.dumps(report, indent=1, default=_json_default) + "\n"),
                       (REPORT_HTML, render_html(report))):
        with replacing(out / name, binary=False) as fh:
            fh.write(text)
    logger.info("wrote %s and %s", out / REPORT_JSON, out / REPORT_HTML)
