"""Property-based fuzzing (hypothesis) of every public function of :mod:`beadsim.analysis`.

Each function listed in ``beadsim.analysis.__all__`` is called with random and malformed arguments, one
per required parameter, drawn from a pool chosen by the parameter's name: float arrays of random shapes
holding NaN, infinities and huge values, empty arrays, wrong dtypes, chains with indices out of range,
small random mdtraj trajectories with and without bonds, missing files, and plain junk. Property: the call
returns or raises a :class:`beadsim.errors.BeadsimError`; any other exception is a bug. Small budget by
default, large with ``--faults-long``.
"""

import inspect

import mdtraj
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st
from hypothesis.extra import numpy as hnp

import beadsim.analysis as analysis
from beadsim.errors import BeadsimError

SHORT, LONG = 20, 150

FUNCTIONS = sorted(name for name in analysis.__all__ if inspect.isfunction(getattr(analysis, name)))

floats = st.floats(allow_nan=True, allow_infinity=True, width=64)
arrays = st.one_of(
    hnp.arrays(np.float64, hnp.array_shapes(min_dims=0, max_dims=3, min_side=0, max_side=6), elements=floats),
    hnp.arrays(np.float64, st.tuples(st.integers(1, 5), st.integers(1, 8), st.just(3)),
               elements=st.floats(-5, 5)),
    hnp.arrays(np.int64, hnp.array_shapes(max_dims=2, max_side=5), elements=st.integers(-3, 10)),
)
junk = st.one_of(st.none(), st.text(max_size=5), st.integers(-10, 10), floats, st.booleans(),
                 st.lists(st.integers(-2, 12), max_size=5), st.just([[0, 1, 2], [2, 30]]), st.just({}))
chains = st.one_of(st.just([np.arange(4)]), st.just([np.arange(3), np.arange(3, 8)]),
                   st.lists(hnp.arrays(np.int64, st.integers(0, 5), elements=st.integers(-2, 9)), max_size=3), junk)


@st.composite
def trajectories(draw):
    """Small random mdtraj trajectories: 1-3 chains of 1-6 beads, bonded or not, periodic or not, NaN or not."""
    lengths = draw(st.lists(st.integers(1, 6), min_size=1, max_size=3))
    top = mdtraj.Topology()
    bonded = draw(st.booleans())
    for n in lengths:
        chain = top.add_chain()
        atoms = [top.add_atom("B", mdtraj.element.carbon, top.add_residue("MON", chain)) for _ in range(n)]
        if bonded:
            for a, b in zip(atoms[:-1], atoms[1:]):
                top.add_bond(a, b)
    n_frames = draw(st.integers(1, 6))
    xyz = draw(hnp.arrays(np.float32, (n_frames, top.n_atoms, 3), elements=st.floats(-3, 3, width=32)))
    if draw(st.booleans()):
        xyz[0, 0, 0] = np.nan
    traj = mdtraj.Trajectory(xyz, top, time=np.arange(n_frames, dtype=np.float32))
    if draw(st.booleans()):
        traj.unitcell_vectors = np.tile(np.eye(3, dtype=np.float32) * 4, (n_frames, 1, 1))
    return traj


def pool(name):
    """Values for a parameter, by its name."""
    if name in ("traj",):
        return st.one_of(trajectories(), junk)
    if name in ("chains",):
        return chains
    if name in ("topology",):
        return st.one_of(trajectories().map(lambda t: t.topology), junk)
    if name in ("path", "traj_path"):
        return st.sampled_from(["/nonexistent/file.h5", __file__, "", "."])
    if name == "summary":
        return st.one_of(junk, st.just({"quantities": None}), st.just({"skipped": 3}))
    return st.one_of(arrays, junk)


def required(fn):
    sig = inspect.signature(fn)
    return [p.name for p in sig.parameters.values()
            if p.default is p.empty and p.kind in (p.POSITIONAL_ONLY, p.POSITIONAL_OR_KEYWORD)]


@pytest.mark.parametrize("name", FUNCTIONS)
def test_public_analysis_function_raises_only_beadsim_errors(name, request, tally, tmp_path):
    fn = getattr(analysis, name)
    kind = "analysis functions with random and malformed input"
    budget = LONG if request.config.getoption("--faults-long") else SHORT

    @settings(max_examples=budget, deadline=None, suppress_health_check=list(HealthCheck))
    @given(st.tuples(*[pool(p) for p in required(fn)]))
    def prop(args):
        tally.add(kind, bad_inputs=1)
        kwargs = {"out_dir": str(tmp_path / "out")} if name == "analyze_file" else {}
        try:
            with np.errstate(all="ignore"):
                fn(*args, **kwargs)
        except BeadsimError:
            pass
        except Exception:
            tally.add(kind, uncaught=1)
            raise
    prop()
