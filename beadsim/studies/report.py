"""Plain-text report of a finished study for the terminal."""


def _pm(value, error, digits=3):
    if value is None:
        return "-"
    if error is None or error != error:  # None or NaN
        return f"{value:.{digits}g} (no error bar)"
    return f"{value:.{digits}g} +- {error:.2g}"


def format_study(summary):
    """Render a study summary (from :func:`beadsim.studies.sweep.run_study`) as a few readable lines."""
    study = summary["study"]
    c = summary["points"]
    lines = [f"points: {c['done']} done, {c['failed']} failed, {c['pending'] + c['running']} not run"]
    for key, message in summary.get("failed", {}).items():
        lines.append(f"  failed {key}: {message}")
    estimates = summary.get("theta", [])
    if estimates:
        lines.append(f"theta point ({study['control']}), estimators side by side:")
        width = max(len(e["method"]) for e in estimates)
        for e in estimates:
            note = f"  [{e['note']}]" if e.get("note") else ""
            lines.append(f"  {e['method']:<{width}}  {_pm(e['value'], e['error'])}{note}")
    best = summary.get("theta_combined")
    if best:
        lines.append(f"theta estimate: {_pm(best['value'], best['error'])} ({best['how']})")
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
