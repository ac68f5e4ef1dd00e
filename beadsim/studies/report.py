"""Plain-text report of a finished study for the terminal: the verdict first, then the details."""


def _pm(value, error, digits=3):
    if value is None:
        return "-"
    if error is None or error != error:  # None or NaN
        return f"{value:.{digits}g} (no error bar)"
    return f"{value:.{digits}g} +- {error:.2g}"


def _answer(entry, digits=3):
    """'value +- error' or the entry's 'not determined: ...' reason."""
    if entry.get("value") is None:
        return entry.get("reason", "not determined")
    return _pm(entry["value"], entry.get("error"), digits)


def format_verdict(verdict, control):
    """The verdict block of a study summary (:func:`beadsim.studies.sweep.verdict`) as lines of text."""
    lines = ["verdict"]
    theta = verdict["theta"]
    lines.append(f"  theta ({control}, N -> infinity): {_answer(theta)}")
    if theta.get("value") is not None:
        syst = theta.get("systematic_error")
        lines.append(f"    statistical {theta['statistical_error']:.2g}, between estimators "
                     f"{'-' if syst is None else f'{syst:.2g}'}; chain lengths N = "
                     f"{', '.join(str(n) for n in theta['chain_lengths'])}")
        for line in theta["estimators"]:
            lines.append(f"    {line}")
        if theta["disagree"]:
            lines.append(f"    do not agree within their errors: {', '.join(theta['disagree'])}")
        else:
            lines.append("    every extrapolated estimator agrees with the quoted value within its errors")
    mid = verdict["coil_globule_midpoint"]
    where = f", N = {mid['n_beads']}" if mid.get("n_beads") else ""
    lines.append(f"  coil-globule midpoint (longest chain{where}): {_answer(mid)}")
    for key, label in (("nu_good_side", "best"), ("nu_poor_side", "poorest")):
        entry = verdict[key]
        at = f" at control {entry['control']:g}" if entry.get("control") is not None else ""
        lines.append(f"  nu, {label} solvent sampled{at}: {_answer(entry)}")
    return lines


def format_study(summary):
    """Render a study summary (from :func:`beadsim.studies.sweep.run_study`) as a few readable lines."""
    study = summary["study"]
    c = summary["points"]
    lines = []
    if summary.get("verdict"):
        lines += format_verdict(summary["verdict"], study["control"])
    lines.append(f"points: {c['done']} done, {c['failed']} failed, {c['pending'] + c['running']} not run")
    if study.get("sampling"):
        lines.append(f"sampling: {study['sampling']['note']}")
    for key, message in summary.get("failed", {}).items():
        lines.append(f"  failed {key}: {message}")
    estimates = summary.get("theta", [])
    if estimates:
        lines.append(f"finite-N theta estimators ({study['control']}), side by side:")
        width = max(len(e["method"]) for e in estimates)
        for e in estimates:
            note = f"  [{e['note']}]" if e.get("note") else ""
            lines.append(f"  {e['method']:<{width}}  {_pm(e['value'], e['error'])}{note}")
    for x in summary.get("theta_extrapolated", []):
        note = f"  [{x['note']}]" if x.get("note") else ""
        lines.append(f"  N -> infinity, {x['method']}: {_pm(x['value'], x['error'])}{note}")
    for item in summary.get("collapse", []):
        lines.append(f"  {item}")
    mbar = summary.get("mbar", {})
    if mbar.get("curves_csv"):
        lines.append(f"MBAR curves (each N's temperatures combined): {mbar['curves_csv']}")
    elif mbar.get("note"):
        lines.append(f"MBAR curves: {mbar['note']}")
    lines.append(f"results table: {summary.get('results_csv')}")
    if summary.get("figures"):
        lines.append(f"figures in: {summary['figures']}")
    return "\n".join(lines)
