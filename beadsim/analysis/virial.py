"""Second virial coefficient of two molecules from sampled conformations, and the interpenetration ratio.

Physics
-------
For two molecules with inter-molecular energy U_12 (centre-of-mass separation
r, conformations and orientations of both),

    B2 = (1/2) integral d^3r (1 - <exp(-U_12 / kT)>),

the average running over both molecules' equilibrium conformations and
uniform orientations (e.g. Yamakawa, Modern Theory of Polymer Solutions,
1971). For single beads it reduces to B2 = -2 pi integral (exp(-u(r)/kT) - 1) r^2 dr.
The interpenetration ratio is Psi* = B2 / (4 pi^(3/2) <Rg^2>^(3/2)); hard
spheres give 1.619 (exact), long self-avoiding walks about 0.247 (Li, Madras
and Sokal, J. Stat. Phys. 80, 661, 1995; from memory), theta chains 0.

Estimator
---------
1. Frames are centred on their centre of mass (equal bead masses); beads whose
   type interacts with no type of the molecule are then dropped from the
   energy (they still count in Rg^2). Bonded terms and intra-molecular
   exclusions of the force field play no part.
2. Frame pairs: frame i is paired with frame i + h, h = n_frames // 2, for
   i = 0 .. h - 1 (with an odd number of frames the last one is not used).
   Every frame enters exactly one pair, and partners lie half a trajectory
   apart, so a pair's two conformations are as independent as the
   trajectory allows. Each pair is one unit of the error analysis.
3. For each pair, U_12 vanishes once the centres are farther apart than
   R = reach_A + reach_B + r_cut (reach: largest bead distance from the centre
   among interacting beads), so its B2 is exactly (1/2) (4 pi R^3 / 3) <f>_ball,
   f = 1 - exp(-U_12 / kT), averaged over B's centre uniform in the ball of
   radius R and B's orientation uniform (A's orientation can stay fixed:
   only the relative one matters). The ball average is estimated with
   ``n_samples / n_pairs`` placements, the radius stratified in the volume
   coordinate (equal-volume shells, one placement each;
   :func:`beadsim.kernels.virial.mayer_ball_average`). Why this design:
   f of two coils is near 1 when the centres are close and exactly 0 over
   most of the ball, so most of its variance is between radii; stratifying the
   radius removes that part at no cost, while a fixed radial quadrature
   would add a discretisation bias to a function that drops steeply near the
   core of each bead. The per-pair radius keeps the ball as small as each
   pair allows.
4. B2 is the mean over pairs; <Rg^2> the mean over the frames used (each
   pair contributes its two frames), and Psi* follows from both.

Errors
------
A delete-a-group jackknife over consecutive blocks of pairs, in frame order
(Busing, Meijer and van der Leeden, Stat. Comput. 9, 3, 1999, for unequal
group sizes; from memory). With n pairs in K blocks of m_j pairs,
theta_(j) the estimate without block j, h_j = n / m_j and pseudo-values
p_j = h_j theta - (h_j - 1) theta_(j),

    var = (1/K) sum_j (p_j - p_bar)^2 / (h_j - 1),   p_bar = K theta - sum_j (1 - 1/h_j) theta_(j).

For a mean the pseudo-values are the block means and var is exactly unbiased
for independent pairs (E (mean_j - mean)^2 = s^2 (n - m_j) / (m_j n)).
Because every frame and every random placement belongs to exactly one pair,
the pairs' Monte Carlo noise and their conformational spread both enter once;
blocks of neighbouring pairs absorb residual correlation between frames close
in time (frame i's partner is i + h, so a block removes two stretches of the
trajectory). Pairing every frame with many others would lower only the part of
the conformational variance that is not a sum of single-molecule terms, and a
frame jackknife would then count each pair's Monte Carlo noise twice.

One frame
---------
With ``n_frames == 1`` both molecules are that conformation, a rigid body:
only orientations are averaged. The placements are then split into
``n_blocks`` independent batches, which play the role of the pairs.
"""

import logging
import math
from dataclasses import dataclass

import numpy as np

from .._validate import as_array, positive, positive_int
from ..errors import AnalysisError, InputError
from ..kernels.forces import PAIR_NONE
from ..kernels.virial import centred_reach, mayer_ball_average
from ..model.potentials import ForceField, PairPotential
from ..model.system import System

logger = logging.getLogger(__name__)

DEFAULT_SAMPLES = 200_000
"""Placements per call, spread evenly over the frame pairs (our choice: see :func:`compute_second_virial`)."""

DEFAULT_BLOCKS = 20
"""Jackknife blocks of consecutive pairs (common practice)."""


@dataclass(frozen=True)
class SecondVirial:
    """Second virial coefficient of two molecules and the interpenetration ratio, with errors.

    Attributes
    ----------
    b2 : float
        B2, sigma^3.
    b2_error : float
        Jackknife standard error of ``b2``, sigma^3 (0 when B2 is exactly 0).
    psi_star : float or None
        Psi* = B2 / (4 pi^(3/2) <Rg^2>^(3/2)); None when <Rg^2> = 0 (a single bead).
    psi_star_error : float or None
        Jackknife standard error of ``psi_star``.
    rg2 : float
        <Rg^2> over the frames used, sigma^2 (equal bead masses).
    n_frames_used : int
        Frames that entered pairs.
    n_pairs : int
        Frame pairs (batches of placements for a single frame).
    n_samples : int
        Placements evaluated in all (0 when nothing interacts).
    n_blocks : int
        Jackknife blocks.
    notes : tuple of str
        Remarks on how the input was treated.
    """

    b2: float
    b2_error: float
    psi_star: float | None
    psi_star_error: float | None
    rg2: float
    n_frames_used: int
    n_pairs: int
    n_samples: int
    n_blocks: int
    notes: tuple

    def as_dict(self):
        """Plain-dict copy (JSON-ready)."""
        return {**self.__dict__, "notes": list(self.notes)}


def _pair_arrays(forcefield, types):
    """Pair kinds, parameter rows, tables and the largest cutoff for bead ``types`` from a ForceField."""
    if isinstance(forcefield, PairPotential):
        forcefield = ForceField(pair=forcefield)
    if not isinstance(forcefield, ForceField):
        raise InputError("forcefield: expected a beadsim ForceField or pair potential, got "
                         f"{type(forcefield).__name__}")
    n = types.size
    system = System(np.zeros((n, 3)), [n], types=types, bonds=np.zeros((0, 2), dtype=np.int64),
                    angles=np.zeros((0, 3), dtype=np.int64))
    compiled = forcefield.compile(system)
    kinds, params, tables = compiled.arrays[:3]
    return kinds, params, tables, float(compiled.cutoff)


def _block_jackknife(estimate, sums, n_blocks):
    """Delete-a-group jackknife (see the module notes) of ``estimate(*means)`` over blocks of units.

    Parameters
    ----------
    estimate : callable
        Maps the unit means of each row of ``sums`` to the statistic.
    sums : ndarray, shape (n_quantities, n_units), float64
        Per-unit values, units in order.
    n_blocks : int
        K, 2 <= K <= n_units; blocks are consecutive and differ in size by at most one.

    Returns
    -------
    (float, float)
        The statistic over all units and its standard error.
    """
    n = sums.shape[1]
    theta = estimate(*sums.mean(axis=1))
    edges = np.linspace(0, n, n_blocks + 1).round().astype(np.int64)
    total = sums.sum(axis=1)
    pseudo, h = np.empty(n_blocks), np.empty(n_blocks)
    leave_out = np.empty(n_blocks)
    for j in range(n_blocks):
        m = edges[j + 1] - edges[j]
        leave_out[j] = estimate(*((total - sums[:, edges[j]:edges[j + 1]].sum(axis=1)) / (n - m)))
        h[j] = n / m
        pseudo[j] = h[j] * theta - (h[j] - 1.0) * leave_out[j]
    centre = n_blocks * theta - np.sum((1.0 - 1.0 / h) * leave_out)
    return float(theta), float(math.sqrt(np.sum((pseudo - centre) ** 2 / (h - 1.0)) / n_blocks))


def compute_second_virial(conformations, types, forcefield, temperature, *, n_samples=DEFAULT_SAMPLES,
                          n_blocks=DEFAULT_BLOCKS, seed=0):
    """Second virial coefficient B2 of two molecules and their interpenetration ratio Psi*.

    See the module docstring for the physics, the estimator and its error.

    Parameters
    ----------
    conformations : array_like, shape (n_frames, n_beads, 3), float64
        One molecule per frame, whole (no periodic wrapping), sigma; frames are
        equilibrium samples in trajectory order, ideally close to independent.
        ``n_frames == 1`` (a rigid body) or ``n_frames >= 4``.
    types : array_like, shape (n_beads,), int64
        Bead type of each bead (indices into the force field's pair table).
    forcefield : ForceField or PairPotential
        Its pair potentials act between beads of different molecules; a bare
        pair potential acts between every pair of bead types.
    temperature : float
        kT, epsilon (> 0).
    n_samples : int
        Random placements in all, spread evenly over the pairs (rounded up to
        a whole number per pair). The default takes about a second for 100
        frames of 256 beads on one core; for purely repulsive chains its Monte
        Carlo part of the error is then well below the spread between the
        conformation pairs (see Notes for attractive ones).
    n_blocks : int
        Jackknife blocks of consecutive pairs (fewer if there are fewer
        pairs), >= 2.
    seed : int
        Seed of the counter-based random stream (>= 0); equal seeds give equal results.

    Returns
    -------
    SecondVirial

    Raises
    ------
    InputError
        Wrong shapes or types, non-finite positions, negative bead types,
        ``temperature`` not > 0, counts not positive integers.
    AnalysisError
        2 or 3 frames (fewer than two pairs for an error estimate), or a pair
        evaluation that is not a finite number.

    Notes
    -----
    With attraction strong against kT (near and below the theta point),
    exp(-U_12 / kT) of the rare placements where two coils share many
    contacts dominates the average: the Mayer values are heavy-tailed
    (f below -100 in about one placement in 10^4 for two grown 64-bead
    self-avoiding walks with Lennard-Jones cut at 2.5 sigma at kT = 3), B2 converges slowly with
    ``n_samples`` and the jackknife error is itself uncertain. Compare
    results at several ``n_samples`` and seeds there.
    """
    x = as_array(conformations, "conformations", shape=(None, None, 3))
    n_frames, n_beads = x.shape[0], x.shape[1]
    if n_beads == 0:
        raise InputError("conformations: expected at least one bead per frame, got shape "
                         f"{x.shape}")
    types = as_array(types, "types", shape=(n_beads,), dtype=np.int64)
    if np.any(types < 0):
        raise InputError(f"types: bead types must be >= 0, got minimum {types.min()}")
    kt = positive(temperature, "temperature")
    n_samples = positive_int(n_samples, "n_samples")
    n_blocks = positive_int(n_blocks, "n_blocks")
    if n_blocks < 2:
        raise InputError(f"n_blocks: need at least 2 jackknife blocks, got {n_blocks}")
    seed = positive_int(seed, "seed", allow_zero=True)
    if seed >= 2 ** 64:
        raise InputError(f"seed: must be below 2**64 (a 64-bit stream seed), got {seed}")
    if n_frames == 0 or n_frames in (2, 3):
        raise AnalysisError(f"conformations: got {n_frames} frame(s); B2 needs at least 4 frames (two frame "
                            "pairs, for an error estimate) or exactly 1 frame (a rigid body)")
    kinds, params, tables, cutoff = _pair_arrays(forcefield, types)

    notes = []
    if n_frames == 1:
        n_pairs = n_blocks
        first, second = np.zeros(n_pairs, dtype=np.int64), np.zeros(n_pairs, dtype=np.int64)
        notes.append("one frame: B2 of a rigid body, averaged over orientations only; the placements are "
                     f"split into {n_pairs} independent batches for the error")
    else:
        n_pairs = n_frames // 2
        first = np.arange(n_pairs)
        second = first + n_pairs
        if n_frames % 2:
            notes.append(f"odd number of frames: the last frame ({n_frames - 1}) was not used")
    n_blocks = min(n_blocks, n_pairs)
    centred = x - x.mean(axis=1, keepdims=True)
    rg2_frame = np.einsum("fik,fik->f", centred, centred) / n_beads
    rg2_pair = 0.5 * (rg2_frame[first] + rg2_frame[second])

    present = np.unique(types)
    active = np.isin(types, present[np.any(kinds[np.ix_(present, present)] != PAIR_NONE, axis=1)])
    if not active.any():
        notes.append("no pair interaction between any beads of the two molecules: B2 = 0 exactly")
        b2_pair = np.zeros(n_pairs)
        per_pair = 0
    else:
        inner = np.ascontiguousarray(centred[:, active])
        inner_types = np.ascontiguousarray(types[active])
        reach = np.array([centred_reach(inner[f]) for f in range(n_frames)])
        per_pair = -(-n_samples // n_pairs)
        beta = 1.0 / kt
        b2_pair = np.empty(n_pairs)
        for k in range(n_pairs):
            radius = reach[first[k]] + reach[second[k]] + cutoff
            mean_f = mayer_ball_average(inner[first[k]], inner_types, inner[second[k]], inner_types, radius,
                                        per_pair, np.uint64(seed), k * per_pair, kinds, params, tables, cutoff,
                                        beta)
            b2_pair[k] = 0.5 * (4.0 * math.pi / 3.0) * radius ** 3 * mean_f
        if not np.all(np.isfinite(b2_pair)):
            bad = int(np.flatnonzero(~np.isfinite(b2_pair))[0])
            raise AnalysisError(f"B2 of frame pair ({first[bad]}, {second[bad]}) is not finite: the Mayer function "
                                f"overflowed (kT = {kt:g} is too low for this attraction)")

    b2, b2_error = _block_jackknife(lambda b: b, b2_pair[None, :], n_blocks)
    rg2 = float(rg2_pair.mean())
    if rg2 > 0:
        norm = 4.0 * math.pi ** 1.5
        psi, psi_error = _block_jackknife(lambda b, r: b / (norm * r ** 1.5), np.stack([b2_pair, rg2_pair]),
                                          n_blocks)
    else:
        psi = psi_error = None
        notes.append("zero radius of gyration (a single bead): psi_star is undefined")
    logger.info("B2 = %.6g +- %.3g sigma^3 from %d pairs x %d placements", b2, b2_error, n_pairs, per_pair)
    return SecondVirial(b2=b2, b2_error=b2_error, psi_star=psi, psi_star_error=psi_error, rg2=rg2,
                        n_frames_used=1 if n_frames == 1 else 2 * int(n_pairs), n_pairs=int(n_pairs),
                        n_samples=int(per_pair * n_pairs), n_blocks=int(n_blocks), notes=tuple(notes))
