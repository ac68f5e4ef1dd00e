"""Input files (TOML) -> validated, typed settings.

Every message names the file, the section and key, and what is allowed. The
schema below is the single source of truth for the input reference in the
README: each entry is ``key: (type, default, rule, help)``; a default of
``REQUIRED`` marks a key that must be given.

Solvent-quality presets (section ``[solvent]``) fill in the non-bonded
potential and the temperature from the theta points shipped in
``beadsim/data/theta_points.toml``.
"""

import difflib
import hashlib
import json
import math
import sys
from importlib import resources
from pathlib import Path

from .errors import InputError
from .model.potentials import BOND_POTENTIALS, EXCLUSIONS, PAIR_POTENTIALS
from .engine.integrators import INTEGRATORS

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

REQUIRED = object()


def choice(*allowed):
    return ("one of " + ", ".join(map(str, allowed)), lambda v: v in allowed)


POSITIVE = ("a number > 0", lambda v: v > 0)
NON_NEGATIVE = ("a number >= 0", lambda v: v >= 0)
AT_LEAST_ONE = ("an integer >= 1", lambda v: v >= 1)
_ANY = ("any value", lambda v: True)

SCHEMA = {
    "chains": {
        "count": (int, 1, AT_LEAST_ONE, "number of chains"),
        "length": ((int, list), REQUIRED, ("an integer >= 2 or a list of them", None),
                   "beads per chain: one number for all chains, or one per chain"),
    },
    "box": {
        "kind": (str, "open", choice("open", "periodic"), "open: isolated chain(s), no images; periodic: cubic box"),
        "density": (float, 0.85, POSITIVE, "bead number density of a periodic box, sigma^-3"),
        "min_distance": (float, 0.8, POSITIVE, "closest two beads may be in the grown start structure, sigma"),
    },
    "bonds": {
        "potential": (str, "fene", choice(*BOND_POTENTIALS), "bond potential"),
        "stiffness": (float, None, POSITIVE, "spring constant, epsilon/sigma^2 (fene: 30, harmonic: 100)"),
        "max_extension": (float, 1.5, POSITIVE, "FENE R0, sigma"),
        "rest_length": (float, 1.0, NON_NEGATIVE, "harmonic rest length, sigma"),
        "table": (str, None, _ANY, "table file (r U [F]) for potential = 'table', relative to the input file"),
        "bond_length": (float, 0.97, POSITIVE, "bond length of the grown start structure, sigma"),
    },
    "nonbonded": {
        "potential": (str, "wca", choice(*PAIR_POTENTIALS), "non-bonded pair potential"),
        "epsilon": (float, 1.0, NON_NEGATIVE, "energy scale (LJ well depth, WCA/cosine-squared core), epsilon"),
        "sigma": (float, 1.0, POSITIVE, "bead diameter, sigma"),
        "cutoff": (float, 2.5, POSITIVE, "lennard_jones cutoff, sigma"),
        "shift": (bool, True, _ANY, "lennard_jones: shift the energy to zero at the cutoff"),
        "tail_correction": (bool, False, _ANY,
                            "lennard_jones with shift = false in a periodic box: add the analytic long-range "
                            "corrections (uniform fluid beyond the cutoff) to pair_energy and pressure"),
        "depth": (float, 1.0, NON_NEGATIVE, "cosine_squared attraction depth phi, epsilon"),
        "table": (str, None, _ANY, "table file (r U [F]) for potential = 'table', relative to the input file"),
        "exclude": (str, "none", choice(*EXCLUSIONS), "bead pairs without non-bonded forces"),
    },
    "bending": {
        "stiffness": (float, 0.0, NON_NEGATIVE, "kappa in U = kappa (1 - cos theta), epsilon; 0 = flexible"),
    },
    "solvent": {
        "quality": (str, None, choice("good", "theta", "poor"),
                    "preset: good = WCA at the set temperature; theta / poor = lennard_jones 2.5 at the "
                    "model's theta temperature / at 0.6 of it"),
        "relative_temperature": (float, None, POSITIVE,
                                 "instead of quality: lennard_jones 2.5 at this multiple of its theta temperature"),
    },
    "dynamics": {
        "integrator": (str, "baoab", choice(*INTEGRATORS), "integration scheme"),
        "timestep": (float, 0.005, POSITIVE, "dt, tau"),
        "temperature": (float, 1.0, POSITIVE,
                        "kT, epsilon: the thermostat's, and that of the Maxwell-Boltzmann start velocities (verlet, "
                        "which has no thermostat, uses it for the start velocities only; brownian starts at rest)"),
        "friction": (float, 0.5, POSITIVE, "Langevin friction gamma, 1/tau"),
        "skin": (float, 0.4, POSITIVE, "Verlet-list skin, sigma"),
    },
    "sampling": {
        "method": (str, "dynamics", choice("dynamics", "hybrid"),
                   "dynamics: Langevin only; hybrid: Langevin segments alternating with Monte Carlo pivot and "
                   "crankshaft moves (open boxes; static averages only, dynamics-derived quantities are "
                   "meaningless)"),
        "segment_steps": (int, 1000, AT_LEAST_ONE, "hybrid: integrator steps between two rounds of moves"),
        "pivot_moves_per_segment": (int, 100, ("an integer >= 0", lambda v: v >= 0),
                                    "hybrid: pivot moves (rotate or reflect one end of a chain) per round"),
        "accepted_pivots_per_bead": (float, None, POSITIVE,
                                     "hybrid: tune the pivot moves per round at the end of equilibration so that "
                                     "about this many per bead are accepted per round (from the acceptance a "
                                     "measured over the second half of equilibration, N beads: ceil(this N / a) "
                                     "clipped to 5-2000, or 2 when a < 4 %); pivot_moves_per_segment is the count "
                                     "until then; unset: a fixed count"),
        "crankshaft_moves_per_segment": (int, 0, ("an integer >= 0", lambda v: v >= 0),
                                         "hybrid: crankshaft moves (one interior bead about its neighbours' "
                                         "axis) per round"),
        "crankshaft_max_angle": (float, 180.0, ("a number in (0, 180]", lambda v: 0 < v <= 180),
                                 "hybrid: largest crankshaft rotation, degrees"),
    },
    "run": {
        "seed": (int, REQUIRED, ("an integer >= 0", lambda v: v >= 0),
                 "seed of the start structure, the start velocities and the noise"),
        "minimize": (bool, True, _ANY, "remove overlaps with FIRE before dynamics"),
        "equilibration_steps": (int, 10_000, ("an integer >= 0", lambda v: v >= 0),
                                "steps before frames are saved (table rows with production = 0)"),
        "production_steps": (int, 100_000, AT_LEAST_ONE, "steps with frames saved"),
    },
    "output": {
        "trajectory": (str, "trajectory.h5", ("a file name ending .h5, .dcd, .xtc or .pdb",
                                              lambda v: Path(v).suffix in (".h5", ".dcd", ".xtc", ".pdb")
                                              and Path(v).name == v),
                       "trajectory file inside the output folder; format from the extension"),
        "frame_interval": (int, 1000, AT_LEAST_ONE, "steps between saved frames"),
        "table_interval": (int, 100, AT_LEAST_ONE, "steps between rows of the scalar table"),
        "checkpoint_interval": (int, 10_000, AT_LEAST_ONE, "steps between checkpoints"),
        "length_scale_nm": (float, 1.0, POSITIVE, "sigma in nm for the written trajectory"),
    },
}

PRESET_POOR_FRACTION = 0.6


def load_theta_points():
    """The shipped theta-point table: ``{model: {theta, uncertainty, source, ...}}``."""
    text = resources.files("beadsim").joinpath("data/theta_points.toml").read_text()
    return tomllib.loads(text)


def read_settings(path):
    """Read and validate an input file.

    Parameters
    ----------
    path : path-like
        TOML input file.

    Returns
    -------
    dict
        ``{section: {key: value}}`` with every default filled in, presets
        resolved and table paths made absolute.

    Raises
    ------
    InputError
        With the file, section, key and what is allowed.
    """
    path = Path(path)
    return validate(load_toml(path), source=str(path), base=path.parent)


def check_only_section(src, raw, name, kind):
    """Refuse any section of a parsed file other than ``[name]``; ``kind`` names the file type in the message."""
    for section in raw:
        if section != name:
            raise InputError(f"{src}: unknown section [{section}]{suggest(section, [name])}; "
                             f"a {kind} file has one section [{name}]")


def load_toml(path):
    """Parse a TOML file into a dict; InputError naming the file if it cannot be read or parsed."""
    path = Path(path)
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the file ({exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{path}: not valid TOML ({exc})") from None


def suggest(word, choices):
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.5)
    return f" (did you mean '{close[0]}'?)" if close else ""


def validate(raw, source="input", base=Path(".")):
    """Validate a parsed input mapping against :data:`SCHEMA`; see :func:`read_settings`."""
    settings = {}
    for section in raw:
        if section not in SCHEMA:
            raise InputError(f"{source}: unknown section [{section}]{suggest(section, SCHEMA)}; "
                             f"sections are {', '.join(SCHEMA)}")
        if not isinstance(raw[section], dict):
            raise InputError(f"{source}: '{section}' must be a section [{section}], not a single value")
    for section, keys in SCHEMA.items():
        settings[section] = check_section(source, section, keys, raw.get(section, {}))
    _resolve(settings, source, base)
    return settings


#: Keys that were replaced by keys of another meaning: ``(section, key): what to write instead``.
RETIRED_KEYS = {
    ("sampling", "accepted_pivots_per_segment"):
        "it was replaced by accepted_pivots_per_bead, a target per bead and round: X accepted pivots per round "
        "for N beads is X / N per bead (studies use 0.4)",
}


def check_section(source, section, keys, given):
    """Validate one section: retired keys are refused with their replacement, unknown keys with the closest
    valid one suggested."""
    for key in given:
        if (section, key) in RETIRED_KEYS:
            raise InputError(f"{source}: [{section}] {key}: {RETIRED_KEYS[(section, key)]}")
        if key not in keys:
            raise InputError(f"{source}: [{section}] unknown key '{key}'{suggest(key, keys)}; "
                             f"allowed keys: {', '.join(keys)}")
    return {key: check_value(source, section, key, spec, given) for key, spec in keys.items()}


def check_value(source, section, key, spec, given):
    """Validate ``given[key]`` against one schema entry; return the value or its default."""
    kind, default, (rule_text, rule), _ = spec
    where = f"{source}: [{section}] {key}"
    if key not in given:
        if default is REQUIRED:
            raise InputError(f"{where} is required ({rule_text})")
        return default
    value = given[key]
    kinds = kind if isinstance(kind, tuple) else (kind,)
    if float in kinds and isinstance(value, int) and not isinstance(value, bool):
        value = float(value)
    if isinstance(value, bool) and bool not in kinds or not isinstance(value, kinds):
        names = " or ".join("list" if k is list else k.__name__ for k in kinds)
        raise InputError(f"{where}: expected {names}, got {type(value).__name__} {value!r}")
    if isinstance(value, float) and not math.isfinite(value):
        raise InputError(f"{where}: must be finite, got {value!r}")
    if rule is not None and not rule(value):
        raise InputError(f"{where}: must be {rule_text}, got {value!r}")
    return value


def _resolve(s, source, base):
    """Cross-key checks, presets and derived values."""
    lengths = s["chains"]["length"]
    count = s["chains"]["count"]
    if isinstance(lengths, list):
        if len(lengths) != count or not all(isinstance(v, int) and not isinstance(v, bool) and v >= 2
                                            for v in lengths):
            raise InputError(f"{source}: [chains] length: a list must hold {count} integers >= 2 "
                             f"(one per chain, count = {count}), got {lengths!r}")
    elif lengths < 2:
        raise InputError(f"{source}: [chains] length: must be an integer >= 2, got {lengths!r}")
    else:
        s["chains"]["length"] = [lengths] * count
    if s["bonds"]["stiffness"] is None:
        s["bonds"]["stiffness"] = 30.0 if s["bonds"]["potential"] == "fene" else 100.0
    for section in ("bonds", "nonbonded"):
        if s[section]["potential"] == "table":
            if not s[section]["table"]:
                raise InputError(f"{source}: [{section}] table: a table file is required when potential = 'table'")
            s[section]["table"] = str((base / s[section]["table"]).resolve())
    nb = s["nonbonded"]
    if nb["potential"] == "lennard_jones" and nb["cutoff"] < 2 ** (1 / 6) * nb["sigma"]:
        raise InputError(f"{source}: [nonbonded] cutoff: {nb['cutoff']} is below the LJ minimum 2^(1/6) sigma "
                         f"= {2 ** (1 / 6) * nb['sigma']:.4f}; use potential = 'wca' for pure repulsion")
    if s["bonds"]["potential"] == "fene" and s["bonds"]["bond_length"] >= s["bonds"]["max_extension"]:
        raise InputError(f"{source}: [bonds] max_extension: FENE R0 = {s['bonds']['max_extension']} must exceed "
                         f"the start bond_length = {s['bonds']['bond_length']}")
    _apply_solvent_preset(s, source)
    _check_tail_correction(s, source)
    _check_sampling(s, source)


def _check_tail_correction(s, source):
    """The analytic tail correction holds for Lennard-Jones truncated without shift, in a periodic box."""
    nb = s["nonbonded"]
    if not nb["tail_correction"]:
        return
    where = f"{source}: [nonbonded] tail_correction = true"
    preset = s["solvent"]["quality"] is not None or s["solvent"]["relative_temperature"] is not None
    by_preset = " (set by the [solvent] preset)" if preset else ""
    if nb["potential"] != "lennard_jones":
        raise InputError(f"{where} is for potential = 'lennard_jones' only, got '{nb['potential']}'{by_preset}; "
                         "set tail_correction = false")
    if nb["shift"]:
        raise InputError(f"{where} needs shift = false{by_preset}: the analytic correction completes the truncated, "
                         "unshifted potential; for a shifted one the energy would also need the shift times the "
                         "pair distribution inside the cutoff, which has no closed form")
    if s["box"]["kind"] != "periodic":
        raise InputError(f"{where} needs [box] kind = 'periodic': the correction assumes a uniform fluid beyond "
                         "the cutoff, which an open box is not")


def _check_sampling(s, source):
    """Hybrid sampling needs an open box, a thermostat, some moves and chains with interior beads."""
    sm = s["sampling"]
    if sm["method"] != "hybrid":
        return
    where = f"{source}: [sampling] method = 'hybrid'"
    if s["box"]["kind"] != "open":
        raise InputError(f"{where} needs [box] kind = 'open' (pivot and crankshaft moves are implemented for "
                         "isolated chains only); use method = 'dynamics' in a periodic box")
    if not INTEGRATORS[s["dynamics"]["integrator"]].thermostatted:
        raise InputError(f"{where} needs a thermostatted [dynamics] integrator (baoab or brownian) for the "
                         f"temperature of the Metropolis rule, got '{s['dynamics']['integrator']}'")
    if sm["pivot_moves_per_segment"] == 0 and sm["crankshaft_moves_per_segment"] == 0:
        raise InputError(f"{where}: pivot_moves_per_segment and crankshaft_moves_per_segment are both 0; "
                         "set at least one of them > 0")
    if sm["accepted_pivots_per_bead"] is not None and sm["pivot_moves_per_segment"] == 0:
        raise InputError(f"{where}: accepted_pivots_per_bead tunes the pivot count, so pivot_moves_per_segment "
                         "(the count used until the tuning) must be > 0")
    if max(s["chains"]["length"]) < 3:
        raise InputError(f"{where} needs chains of 3 or more beads ([chains] length), got "
                         f"{s['chains']['length']!r}")


def _apply_solvent_preset(s, source):
    quality, relative = s["solvent"]["quality"], s["solvent"]["relative_temperature"]
    if quality is None and relative is None:
        return
    if quality is not None and relative is not None:
        raise InputError(f"{source}: [solvent] give either quality or relative_temperature, not both")
    if quality == "good":
        s["nonbonded"].update(potential="wca")
        return
    entry = load_theta_points()["lennard_jones_2_5"]
    factor = relative if relative is not None else {"theta": 1.0, "poor": PRESET_POOR_FRACTION}[quality]
    s["nonbonded"].update(potential="lennard_jones", cutoff=2.5, shift=True, epsilon=1.0, sigma=1.0)
    s["dynamics"]["temperature"] = factor * entry["theta"]


def settings_hash(settings):
    """SHA-256 of the resolved settings (canonical JSON), identifying a run."""
    return hashlib.sha256(json.dumps(settings, sort_keys=True).encode()).hexdigest()


def non_default_settings(settings):
    """The part of resolved settings that differs from the input schema's defaults.

    Parameters
    ----------
    settings : dict
        ``{section: {key: value}}``: resolved settings, or a resolved input file as read back by
        :func:`load_toml` (where keys whose value is None are absent).

    Returns
    -------
    dict
        ``{section: {key: value}}`` without the keys left at their defaults (None included) and
        without sections left empty; keys the schema does not know are kept. Two settings with the
        same non-default part describe the same run even when one of them was written by a version
        that lacked a key or section which a later version added with a default.
    """
    given = {}
    for section, values in settings.items():
        changed = {key: value for key, value in values.items()
                   if key not in SCHEMA.get(section, {}) or value != SCHEMA[section][key][1]}
        if changed:
            given[section] = changed
    return given


def to_toml(settings):
    """Render resolved settings as TOML text (the 'resolved input' copy written with a run)."""
    lines = ["# resolved input: every default filled in, presets applied"]
    for section, values in settings.items():
        lines.append(f"\n[{section}]")
        for key, value in values.items():
            if value is not None:
                lines.append(f"{key} = {_toml_value(value)}")
    return "\n".join(lines) + "\n"


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, str):
        return json.dumps(v)
    return repr(v)
