"""Property-based fuzzing (hypothesis) of the input-file parsers and the command line.

Properties: :func:`beadsim.config.read_settings` and :func:`beadsim.studies.sweep.read_study` either return
settings or raise a :class:`beadsim.errors.BeadsimError` (never another exception) for any file: random
TOML documents built from the real section and key names with values of every TOML type, and random
bytes; and ``beadsim.cli.main`` given such files (or bad options) returns 2 or exits 2 through argparse,
with no traceback on stderr. The default budget is small (``max_examples``); ``--faults-long`` raises it.
"""

import json

import pytest
from hypothesis import HealthCheck, assume, given, settings, strategies as st

from beadsim import cli
from beadsim.config import SCHEMA, read_settings
from beadsim.errors import BeadsimError
from beadsim.studies.sweep import STUDY_SCHEMA, read_study

SHORT, LONG = 40, 600


def budget(request):
    return LONG if request.config.getoption("--faults-long") else SHORT


# TOML values of every kind, including the awkward ones (huge and non-finite floats, nested tables)
scalars = st.one_of(st.integers(min_value=-2 ** 63, max_value=2 ** 63 - 1), st.floats(allow_nan=True),
                    st.booleans(), st.text(max_size=12), st.sampled_from(["fene", "wca", "table", "open", "../x.h5",
                                                                            "/tmp/x.h5", "t.h5", ""]))
values = st.recursive(scalars, lambda inner: st.lists(inner, max_size=4) | st.dictionaries(
    st.text(min_size=1, max_size=8), inner, max_size=3), max_leaves=8)


def toml_value(v):
    """TOML text of a value (floats in TOML's own spelling of inf and nan)."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return {"inf": "inf", "-inf": "-inf", "nan": "nan"}.get(repr(v), repr(v))
    if isinstance(v, int):
        return str(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(x)}" for k, x in v.items()) + "}"


def documents(schema_sections):
    """TOML documents: real sections and keys (and some unknown ones) with random values."""
    names = sorted(schema_sections)
    keys = sorted({k for sec in schema_sections.values() for k in sec})
    section = st.sampled_from(names + ["unknown"])
    entries = st.dictionaries(st.sampled_from(keys + ["lenght", "x"]), values, max_size=6)
    return st.dictionaries(section, entries, max_size=len(names)).map(
        lambda doc: "\n".join(f"[{s}]\n" + "\n".join(f"{k} = {toml_value(v)}" for k, v in kv.items())
                              for s, kv in doc.items()) + "\n")


RUN_DOCS = documents(SCHEMA)
STUDY_DOCS = documents({"study": STUDY_SCHEMA})
VALID_BASE = "[chains]\nlength = 8\n[run]\nseed = 1\n"


def check_parser(parse, path, text, tally, kind):
    path.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8", "surrogatepass"))
    tally.add(kind, bad_inputs=1)
    try:
        parse(path)
    except BeadsimError:
        pass
    except Exception:  # the property under test: nothing else escapes
        tally.add(kind, uncaught=1)
        raise


@pytest.fixture
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("fuzz")


def test_run_input_parser_raises_only_beadsim_errors(request, folder, tally):
    (folder / "table.txt").write_text("0.5 1\n1 0\n1.5 0\n2 0\n")

    @settings(max_examples=budget(request), deadline=None, suppress_health_check=list(HealthCheck))
    @given(st.one_of(RUN_DOCS, RUN_DOCS.map(lambda d: VALID_BASE + d), st.binary(max_size=200)))
    def prop(text):
        check_parser(read_settings, folder / "input.toml", text, tally, "input files (run and study)")
    prop()


def test_study_parser_raises_only_beadsim_errors(request, folder, tally):
    (folder / "model.toml").write_text(VALID_BASE)

    @settings(max_examples=budget(request), deadline=None, suppress_health_check=list(HealthCheck))
    @given(st.one_of(STUDY_DOCS, STUDY_DOCS.map(lambda d: d.replace("[study]\n", '[study]\nbase = "model.toml"\n',
                                                                      1)), st.binary(max_size=200)))
    def prop(text):
        check_parser(read_study, folder / "study.toml", text, tally, "input files (run and study)")
    prop()


def test_command_line_exits_2_without_traceback_on_bad_input(request, folder, tally, capsys):
    @settings(max_examples=max(budget(request) // 4, 10), deadline=None, suppress_health_check=list(HealthCheck))
    @given(RUN_DOCS, st.sampled_from([["run"], ["run", "--resume"], ["sweep"], ["sweep", "--workers", "0"],
                                      ["analyze"], ["run", "--bogus"], ["sweep", "--cluster", "local:x"]]))
    def prop(text, command):
        path = folder / "bad.toml"
        path.write_text(text, encoding="utf-8")
        try:  # a document that happens to be a valid input would start a real run: not a bad input
            (read_study if command[0] == "sweep" else read_settings)(path)
            assume(False)
        except BeadsimError:
            pass
        tally.add("command line with bad input", bad_inputs=1)
        try:
            status = cli.main([command[0], str(path), *command[1:], "--out", str(folder / "out")]
                              if command[0] != "analyze" else ["analyze", str(path), "--out", str(folder / "an")])
        except SystemExit as exc:  # argparse refuses unknown options itself, with status 2
            status = exc.code
        except Exception:
            tally.add("command line with bad input", uncaught=1)
            raise
        err = capsys.readouterr().err
        if status != 2 or "Traceback" in err:
            tally.add("command line with bad input", uncaught=1)
        assert status == 2, err
        assert "Traceback" not in err
    prop()
