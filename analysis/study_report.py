"""Write a Markdown record of a finished study folder: per-point means, estimators, figures.

Usage: python analysis/study_report.py STUDY_FILE STUDY_FOLDER OUTPUT.md TITLE [FINDINGS.md]

FINDINGS.md, if given, is a hand-written interpretation placed under the title.

Reproduce a study first with ``beadsim sweep STUDY_FILE --out STUDY_FOLDER`` (the study files
of the records are under analysis/studies/). Figures are copied beside the Markdown.
"""

import json
import platform
import shutil
import sys
from pathlib import Path

import pandas as pd

from beadsim.studies.report import format_verdict
from beadsim.studies.theta import point_means


def main(study_file, folder, output, title, findings=None):
    folder, output = Path(folder), Path(output)
    summary = json.loads((folder / "study_summary.json").read_text())
    table = pd.read_csv(folder / "results.csv")
    figs = output.parent / "figures" / output.stem
    figs.mkdir(parents=True, exist_ok=True)
    rg2 = point_means(table, "rg2")
    extra = table.groupby(["n_beads", "control"]).agg(
        runs=("rg2", "size"), re2=("re2", "mean"), nu_internal=("nu_internal", "mean"),
        b2=("b2", "mean"), b2_error=("b2_error", "mean"), psi=("psi_star", "mean"),
        psi_error=("psi_star_error", "mean"), steps=("production_steps", "max"),
        n_independent=("n_independent", "sum")).reset_index()
    per_point = rg2.merge(extra, on=["n_beads", "control"])
    lines = [f"# {title}", "",
             f"Study file: `{study_file}`; reproduce with `beadsim sweep {study_file} --out FOLDER`, then "
             f"`python analysis/study_report.py {study_file} FOLDER {output} \"{title}\"`.", ""]
    if findings:
        lines += ["## Findings", "", Path(findings).read_text().strip(), ""]
    if summary.get("verdict"):
        lines += ["## Verdict (as printed by beadsim sweep)", "", "```"]
        lines += format_verdict(summary["verdict"], summary["study"]["control"]) + ["```", ""]
    lines += [f"Machine: {platform.machine()}, {platform.system()}; wall time of the last sweep call "
             f"{summary.get('wall_seconds')} s (resumed studies count only the last call). Sampling: "
             f"{summary['study'].get('sampling', {}).get('note', 'dynamics')}.", "",
             "## Per point (error of <Rg^2> from each run's statistical inefficiency, widened by replica scatter)",
             "", "| N | control | runs | production steps | <Rg^2> | error | <Re^2>/<Rg^2> | nu_internal | B2 "
             "[sigma^3] | Psi* | independent samples |", "|---|---|---|---|---|---|---|---|---|---|---|"]
    for r in per_point.itertuples():
        lines.append(f"| {r.n_beads} | {r.control:g} | {r.runs} | {int(r.steps)} | {r.mean:.4g} | {r.error:.2g} | "
                     f"{r.re2 / r.mean:.3f} | {r.nu_internal:.3f} | {r.b2:.4g} +- {r.b2_error:.2g} | "
                     f"{r.psi:.3g} +- {r.psi_error:.2g} | {r.n_independent:.0f} |")
    lines += ["", "## Finite-N theta estimators", "", "| method | value | error | note |", "|---|---|---|---|"]
    for e in summary.get("theta", []):
        value = "-" if e["value"] is None else f"{e['value']:.4g}"
        error = "-" if e["error"] is None else f"{e['error']:.2g}"
        lines.append(f"| {e['method']} | {value} | {error} | {e.get('note', '')} |")
    lines += ["", "## Extrapolated to N -> infinity (theta(N) = theta + a N^(-1/2))", "",
              "| method | value | error | chi2/dof | p-value | points (N or effective N of pairs) | note |",
              "|---|---|---|---|---|---|---|"]
    for x in summary.get("theta_extrapolated", []):
        value = "-" if x["value"] is None else f"{x['value']:.4g}"
        error = "-" if x["error"] is None else f"{x['error']:.2g}"
        chi = "-" if x["chi2_per_dof"] is None else f"{x['chi2_per_dof']:.2g}"
        p_value = "-" if x["p_value"] is None else f"{x['p_value']:.2g}"
        points = ", ".join(f"{n:.0f}: {v:.3f}+-{e:.2g}" for n, v, e in zip(x["n_used"], x["values_used"],
                                                                          x["errors_used"]))
        lines.append(f"| {x['method']} | {value} | {error} | {chi} | {p_value} | {points} | {x['note']} |")
    if summary.get("theta_combined"):
        c = summary["theta_combined"]
        lines += ["", f"Quoted estimate: **{c['value']:.4g} +- {c['error']:.2g}** ({c['how']}; statistical "
                      f"{c['statistical_error']:.2g}, between estimators {c['systematic_error'] or 0:.2g})."]
    lines += ["", "## Exponents and collapse", ""] + [f"- {item}" for item in summary.get("collapse", [])]
    lines += ["", "## Figures", ""]
    for png in sorted((folder / "figures").glob("*.png")):
        shutil.copy(png, figs / png.name)
        lines.append(f"![{png.stem}](figures/{output.stem}/{png.name})")
    output.write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main(*sys.argv[1:6])
