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

import numpy as np
import pandas as pd


def main(study_file, folder, output, title, findings=None):
    folder, output = Path(folder), Path(output)
    summary = json.loads((folder / "study_summary.json").read_text())
    table = pd.read_csv(folder / "results.csv")
    figs = output.parent / "figures" / output.stem
    figs.mkdir(parents=True, exist_ok=True)
    grouped = table.groupby(["n_beads", "control"])
    per_point = grouped.agg(runs=("rg2", "size"), rg2=("rg2", "mean"), rg2_sd=("rg2", "std"),
                            re2=("re2", "mean"), nu_internal=("nu_internal", "mean"),
                            nu_internal_sd=("nu_internal", "std"), steps=("production_steps", "max"),
                            n_independent=("n_independent", "sum")).reset_index()
    per_point["rg2_error"] = per_point["rg2_sd"] / np.sqrt(per_point["runs"])
    lines = [f"# {title}", "",
             f"Study file: `{study_file}`; reproduce with `beadsim sweep {study_file} --out FOLDER`, then "
             f"`python analysis/study_report.py {study_file} FOLDER {output} \"{title}\"`.", ""]
    if findings:
        lines += ["## Findings", "", Path(findings).read_text().strip(), ""]
    lines += [f"Machine: {platform.machine()}, {platform.system()}; wall time of the last sweep call "
             f"{summary.get('wall_seconds')} s (resumed studies count only the last call).", "",
             "## Per point (mean over replicas; error = replica standard deviation / sqrt(runs))", "",
             "| N | control | runs | production steps | <Rg^2> | error | <Re^2>/<Rg^2> | nu_internal (mean, sd) "
             "| independent samples |", "|---|---|---|---|---|---|---|---|---|"]
    for r in per_point.itertuples():
        lines.append(f"| {r.n_beads} | {r.control:g} | {r.runs} | {int(r.steps)} | {r.rg2:.4g} | {r.rg2_error:.2g} | "
                     f"{r.re2 / r.rg2:.3f} | {r.nu_internal:.3f}, {r.nu_internal_sd:.3f} | {r.n_independent:.0f} |")
    lines += ["", "## Theta estimators", "", "| method | value | error | note |", "|---|---|---|---|"]
    for e in summary.get("theta", []):
        value = "-" if e["value"] is None else f"{e['value']:.4g}"
        error = "-" if e["error"] is None else f"{e['error']:.2g}"
        lines.append(f"| {e['method']} | {value} | {error} | {e.get('note', '')} |")
    if summary.get("theta_combined"):
        c = summary["theta_combined"]
        lines += ["", f"Quoted estimate: **{c['value']:.4g} +- {c['error']:.2g}** ({c['how']})."]
    lines += ["", "## Exponents and collapse", ""] + [f"- {item}" for item in summary.get("collapse", [])]
    lines += ["", "## Figures", ""]
    for png in sorted((folder / "figures").glob("*.png")):
        shutil.copy(png, figs / png.name)
        lines.append(f"![{png.stem}](figures/{output.stem}/{png.name})")
    output.write_text("\n".join(lines) + "\n")


if __name__ == "__main__":
    main(*sys.argv[1:6])
