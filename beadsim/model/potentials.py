"""Pair, bond and bending potentials as small parameter objects, and the force field.

Every potential is in reduced Lennard-Jones units (sigma, epsilon). Each class

1. validates and stores its parameters in the constructor;
2. declares ``kind``, the integer code the kernels dispatch on
   (:mod:`beadsim.kernels.forces`);
3. writes its kernel parameter row in ``row(tables)``, appending any
   :class:`~beadsim.model.tables.Table` it needs to ``tables``;
4. evaluates itself in NumPy in ``energy_force(r2)`` -> ``(U, f/r)``, the
   reference twin of the kernel used by the tests and the benchmark baseline.

A user may register a subclass of their own under a new name in
``PAIR_POTENTIALS`` or ``BOND_POTENTIALS`` as long as it maps onto a kernel
code (a table is always possible: see :class:`TabulatedPair`).
"""

import difflib

import numpy as np

from .._validate import positive
from ..errors import InputError
from ..kernels import forces as K
from .tables import Table

WCA_CUTOFF = 2.0 ** (1.0 / 6.0)


def _lj(r2, epsilon, sigma):
    s6 = (sigma * sigma / r2) ** 3
    return 4.0 * epsilon * (s6 * s6 - s6), 24.0 * epsilon * (2.0 * s6 * s6 - s6) / r2


class PairPotential:
    """Base class of non-bonded pair potentials (see the module docstring for the contract)."""

    kind = K.PAIR_NONE
    cutoff = 0.0

    def row(self, tables):
        """Kernel parameter row, float64 (N_PAIR_PARAMS,)."""
        return np.zeros(K.N_PAIR_PARAMS)

    def energy_force(self, r2):
        """Energy (epsilon) and f/r (epsilon/sigma^2) at squared distances ``r2`` (sigma^2)."""
        r2 = np.asarray(r2, dtype=np.float64)
        return np.zeros_like(r2), np.zeros_like(r2)

    def __repr__(self):
        args = ", ".join(f"{k}={v!r}" for k, v in vars(self).items() if not k.startswith("_"))
        return f"{type(self).__name__}({args})"


class NoPair(PairPotential):
    """No non-bonded interaction (an ideal, phantom chain)."""


class LennardJones(PairPotential):
    """Lennard-Jones 12-6 potential truncated at ``cutoff``, optionally shifted to zero there.

    U(r) = 4 epsilon [(sigma/r)^12 - (sigma/r)^6] - U_shift for r < cutoff.

    Parameters
    ----------
    epsilon : float
        Well depth, epsilon.
    sigma : float
        Bead diameter, sigma.
    cutoff : float
        Truncation distance, sigma; at least 2^(1/6) sigma.
    shift : bool
        Shift the energy to zero at the cutoff (forces unchanged).
    """

    kind = K.PAIR_LJ

    def __init__(self, epsilon=1.0, sigma=1.0, cutoff=2.5, shift=True):
        self.epsilon = positive(epsilon, "lennard_jones epsilon", allow_zero=True)
        self.sigma = positive(sigma, "lennard_jones sigma")
        self.cutoff = positive(cutoff, "lennard_jones cutoff")
        if self.cutoff < WCA_CUTOFF * self.sigma * (1 - 1e-12):
            raise InputError(f"lennard_jones cutoff: {cutoff} is below the potential minimum "
                             f"2^(1/6) sigma = {WCA_CUTOFF * self.sigma:.6f}; use WCA for a purely "
                             "repulsive potential or a cutoff >= that value (2.5 sigma is usual)")
        self.shift = bool(shift)

    @property
    def energy_shift(self):
        """Energy subtracted inside the cutoff, epsilon."""
        return float(_lj(self.cutoff ** 2, self.epsilon, self.sigma)[0]) if self.shift else 0.0

    def row(self, tables):
        p = np.zeros(K.N_PAIR_PARAMS)
        p[:4] = self.epsilon, self.sigma, self.cutoff ** 2, self.energy_shift
        return p

    def energy_force(self, r2):
        r2 = np.asarray(r2, dtype=np.float64)
        u, f = _lj(r2, self.epsilon, self.sigma)
        inside = r2 < self.cutoff ** 2
        return np.where(inside, u - self.energy_shift, 0.0), np.where(inside, f, 0.0)

    def tail_correction(self, density):
        """Analytic long-range corrections for the truncated, unshifted potential.

        Allen and Tildesley, Computer Simulation of Liquids (1987), eqs. 2.144-2.145:
        U_tail/N = (8/3) pi rho eps sigma^3 [(1/3)(sigma/rc)^9 - (sigma/rc)^3],
        p_tail = (16/3) pi rho^2 eps sigma^3 [(2/3)(sigma/rc)^9 - (sigma/rc)^3].

        Parameters
        ----------
        density : float
            Number density, sigma^-3.

        Returns
        -------
        (float, float)
            Energy per bead (epsilon) and pressure (epsilon/sigma^3).
        """
        x3 = (self.sigma / self.cutoff) ** 3
        s3 = self.sigma ** 3
        u = 8.0 / 3.0 * np.pi * density * self.epsilon * s3 * (x3 ** 3 / 3.0 - x3)
        p = 16.0 / 3.0 * np.pi * density ** 2 * self.epsilon * s3 * (2.0 / 3.0 * x3 ** 3 - x3)
        return float(u), float(p)


class WCA(LennardJones):
    """Weeks-Chandler-Andersen repulsion: LJ cut at 2^(1/6) sigma and shifted up by epsilon.

    Weeks, Chandler and Andersen, J. Chem. Phys. 54, 5237 (1971). A chain with
    only this non-bonded term is in athermal good solvent.
    """

    def __init__(self, epsilon=1.0, sigma=1.0):
        super().__init__(epsilon=epsilon, sigma=sigma, cutoff=WCA_CUTOFF * float(sigma), shift=True)

    def __repr__(self):
        return f"WCA(epsilon={self.epsilon!r}, sigma={self.sigma!r})"


class CosineSquared(PairPotential):
    """WCA core plus the cosine-squared attractive tail of Soddemann, Duenweg and Kremer.

    Eur. Phys. J. E 6, 409 (2001): for r < r_min = 2^(1/6) sigma,
    U = 4 eps [(sigma/r)^12 - (sigma/r)^6 + 1/4] - phi; for r_min <= r < 1.5 sigma,
    U = (phi/2) [cos(alpha r^2 + beta) - 1] with alpha = pi / ((2.25 - 2^(1/3)) sigma^2)
    and beta = 2 pi - 2.25 alpha sigma^2, so U and its slope are continuous at r_min
    and at the range 1.5 sigma. The depth ``phi`` sets the solvent quality at
    fixed temperature (phi = 0 is the athermal good solvent).

    Parameters
    ----------
    depth : float
        Attraction depth phi, epsilon (>= 0).
    epsilon : float
        Strength of the repulsive core, epsilon.
    sigma : float
        Bead diameter, sigma.
    """

    kind = K.PAIR_COS2

    def __init__(self, depth=1.0, epsilon=1.0, sigma=1.0):
        self.depth = positive(depth, "cosine_squared depth", allow_zero=True)
        self.epsilon = positive(epsilon, "cosine_squared epsilon")
        self.sigma = positive(sigma, "cosine_squared sigma")
        self.cutoff = 1.5 * self.sigma

    @property
    def alpha(self):
        return np.pi / ((2.25 - 2.0 ** (1.0 / 3.0)) * self.sigma ** 2)

    @property
    def beta(self):
        return 2.0 * np.pi - 2.25 * self.alpha * self.sigma ** 2

    def row(self, tables):
        p = np.zeros(K.N_PAIR_PARAMS)
        p[:7] = (self.epsilon, self.sigma, self.cutoff ** 2, self.depth, self.alpha, self.beta,
                 (WCA_CUTOFF * self.sigma) ** 2)
        return p

    def energy_force(self, r2):
        r2 = np.asarray(r2, dtype=np.float64)
        u_core, f_core = _lj(r2, self.epsilon, self.sigma)
        arg = self.alpha * r2 + self.beta
        core = r2 < (WCA_CUTOFF * self.sigma) ** 2
        tail = ~core & (r2 < self.cutoff ** 2)
        u = np.where(core, u_core + self.epsilon - self.depth, np.where(tail, 0.5 * self.depth * (np.cos(arg) - 1), 0.0))
        f = np.where(core, f_core, np.where(tail, self.depth * self.alpha * np.sin(arg), 0.0))
        return u, f


class TabulatedPair(PairPotential):
    """Pair potential from a table (see :mod:`beadsim.model.tables`); zero beyond its last r.

    Parameters
    ----------
    table : Table or path-like
        The table, or a file to read it from.
    """

    kind = K.PAIR_TABLE

    def __init__(self, table):
        self.table = table if isinstance(table, Table) else Table.from_file(table)
        self.cutoff = self.table.r_last

    def row(self, tables):
        p = np.zeros(K.N_PAIR_PARAMS)
        p[:5] = len(tables), self.table.r_first, self.table.dr, self.table.n_points, self.cutoff ** 2
        tables.append(self.table)
        return p

    def energy_force(self, r2):
        r2 = np.asarray(r2, dtype=np.float64)
        r = np.sqrt(r2)
        inside = r2 < self.cutoff ** 2
        u, du = self.table.evaluate(np.minimum(r, self.table.r_last))
        return np.where(inside, u, 0.0), np.where(inside, -du / r, 0.0)


class BondPotential:
    """Base class of bond potentials (same contract as :class:`PairPotential`)."""

    kind = -1
    max_length = np.inf

    def row(self, tables):
        raise NotImplementedError

    def energy_force(self, r2):
        raise NotImplementedError

    __repr__ = PairPotential.__repr__


class FENE(BondPotential):
    """Finitely extensible nonlinear elastic bond: U = -(k R0^2/2) ln(1 - (r/R0)^2).

    Defaults k = 30 epsilon/sigma^2, R0 = 1.5 sigma (Kremer and Grest,
    J. Chem. Phys. 92, 5057, 1990), used together with WCA between bonded beads.

    Parameters
    ----------
    stiffness : float
        k, epsilon/sigma^2.
    max_extension : float
        R0, sigma; the bond length can never reach it.
    """

    kind = K.BOND_FENE

    def __init__(self, stiffness=30.0, max_extension=1.5):
        self.stiffness = positive(stiffness, "fene stiffness")
        self.max_extension = positive(max_extension, "fene max_extension")
        self.max_length = self.max_extension

    def row(self, tables):
        p = np.zeros(K.N_BOND_PARAMS)
        p[:2] = self.stiffness, self.max_extension
        return p

    def energy_force(self, r2):
        x = np.asarray(r2, dtype=np.float64) / self.max_extension ** 2
        with np.errstate(invalid="ignore", divide="ignore"):
            u = -0.5 * self.stiffness * self.max_extension ** 2 * np.log1p(-x)
        return u, -self.stiffness / (1.0 - x)


class HarmonicBond(BondPotential):
    """Harmonic spring U = (k/2)(r - r_rest)^2.

    Parameters
    ----------
    stiffness : float
        k, epsilon/sigma^2.
    rest_length : float
        r_rest, sigma (0 gives the Gaussian chain with <b^2> = 3 kT / k).
    """

    kind = K.BOND_HARMONIC

    def __init__(self, stiffness=100.0, rest_length=1.0):
        self.stiffness = positive(stiffness, "harmonic stiffness")
        self.rest_length = positive(rest_length, "harmonic rest_length", allow_zero=True)

    def row(self, tables):
        p = np.zeros(K.N_BOND_PARAMS)
        p[:2] = self.stiffness, self.rest_length
        return p

    def energy_force(self, r2):
        r = np.sqrt(np.asarray(r2, dtype=np.float64))
        with np.errstate(invalid="ignore", divide="ignore"):
            return 0.5 * self.stiffness * (r - self.rest_length) ** 2, -self.stiffness * (r - self.rest_length) / r


class TabulatedBond(BondPotential):
    """Bond potential from a table; a bond outside the table's range stops the run.

    Parameters
    ----------
    table : Table or path-like
    """

    kind = K.BOND_TABLE

    def __init__(self, table):
        self.table = table if isinstance(table, Table) else Table.from_file(table)
        self.max_length = self.table.r_last

    def row(self, tables):
        p = np.zeros(K.N_BOND_PARAMS)
        p[:4] = len(tables), self.table.r_first, self.table.dr, self.table.n_points
        tables.append(self.table)
        return p

    def energy_force(self, r2):
        r = np.sqrt(np.asarray(r2, dtype=np.float64))
        u, du = self.table.evaluate(r)
        return u, -du / r


class Bending:
    """Bending stiffness U = kappa (1 - cos theta) on consecutive bond vectors.

    theta is the angle between bond vectors (0 for a straight chain); for large
    kappa the persistence length is about kappa b / kT bond lengths' worth.

    Parameters
    ----------
    stiffness : float
        kappa, epsilon.
    """

    def __init__(self, stiffness=1.0):
        self.stiffness = positive(stiffness, "bending stiffness", allow_zero=True)

    def energy(self, cos_theta):
        """Energy (epsilon) at given cosines."""
        return self.stiffness * (1.0 - np.asarray(cos_theta))

    __repr__ = PairPotential.__repr__


PAIR_POTENTIALS = {
    "none": NoPair,
    "wca": WCA,
    "lennard_jones": LennardJones,
    "cosine_squared": CosineSquared,
    "table": TabulatedPair,
}
BOND_POTENTIALS = {
    "fene": FENE,
    "harmonic": HarmonicBond,
    "table": TabulatedBond,
}
EXCLUSIONS = ("none", "bonded", "bonded_and_angles")


def lookup(registry, name, what):
    """Return ``registry[name]`` or raise InputError listing the choices and the closest match."""
    if isinstance(name, type):
        return name
    if name in registry:
        return registry[name]
    close = difflib.get_close_matches(str(name), list(registry), n=1)
    hint = f" (did you mean '{close[0]}'?)" if close else ""
    raise InputError(f"unknown {what} '{name}'{hint}; choose one of: {', '.join(registry)}")


class CompiledForceField:
    """Arrays the kernels need, produced by :meth:`ForceField.compile`.

    Attributes
    ----------
    arrays : tuple
        The ``ff`` tuple of :func:`beadsim.kernels.forces.total_forces`.
    cutoff : float
        Largest pair cutoff, sigma.
    excl_start, excl : int64 arrays
        Excluded partners of each bead in compressed rows.
    """

    def __init__(self, arrays, cutoff, excl_start, excl):
        self.arrays = arrays
        self.cutoff = cutoff
        self.excl_start = excl_start
        self.excl = excl


class ForceField:
    """Which potentials act between which beads.

    Parameters
    ----------
    pair : PairPotential or dict
        One potential for every pair of bead types, or ``{(type_a, type_b): potential}``
        (symmetric; missing type pairs do not interact).
    bond : BondPotential or sequence of BondPotential
        One potential for every bond, or one per bond type.
    bending : Bending or sequence of Bending, optional
        Bending on every angle (or per angle type); ``None`` for flexible chains.
    exclude : {"none", "bonded", "bonded_and_angles"}
        Bead pairs left out of the non-bonded interaction. The default "none"
        keeps it between bonded beads too, as in the standard bead-spring model.
    """

    def __init__(self, pair=None, bond=None, bending=None, exclude="none"):
        self.pair = WCA() if pair is None else pair
        self.bond = FENE() if bond is None else bond
        self.bending = bending
        if exclude not in EXCLUSIONS:
            raise InputError(f"exclude: '{exclude}' is not allowed; choose one of {', '.join(EXCLUSIONS)}")
        self.exclude = exclude

    def pair_table(self, n_types):
        """Symmetric list of lists of pair potentials for ``n_types`` bead types."""
        if isinstance(self.pair, PairPotential):
            return [[self.pair] * n_types for _ in range(n_types)]
        grid = [[NoPair()] * n_types for _ in range(n_types)]
        for (a, b), pot in dict(self.pair).items():
            if not isinstance(pot, PairPotential):
                raise InputError(f"pair[{a}, {b}]: expected a pair potential, got {pot!r}")
            if not (0 <= a < n_types and 0 <= b < n_types):
                continue
            grid[a][b] = grid[b][a] = pot
        return grid

    def _per_type(self, value, n_types, name, base):
        items = [value] if isinstance(value, base) else list(value)
        if len(items) == 1:
            items = items * max(n_types, 1)
        if len(items) < n_types or not all(isinstance(v, base) for v in items):
            raise InputError(f"{name}: need one {base.__name__} per type ({n_types}), got {value!r}")
        return items

    def bond_list(self, n_types):
        """One bond potential per bond type."""
        return self._per_type(self.bond, n_types, "bond", BondPotential)

    def bending_list(self, n_types):
        """One bending term per angle type."""
        return self._per_type(self.bending, n_types, "bending", Bending)

    def compile(self, system):
        """Build the kernel arrays for ``system`` and check it against the potentials.

        Raises
        ------
        InputError
            If a bond is already longer than its potential allows (FENE R0 or
            the end of a bond table) or the cutoff does not fit the periodic box.
        """
        n_types = int(system.types.max()) + 1 if system.n_beads else 1
        tables = []
        pairs = self.pair_table(n_types)
        pair_kinds = np.array([[p.kind for p in row] for row in pairs], dtype=np.int64)
        pair_params = np.array([[p.row(tables) if p.kind != K.PAIR_TABLE or i <= j else np.zeros(K.N_PAIR_PARAMS)
                                 for j, p in enumerate(row)] for i, row in enumerate(pairs)])
        for i in range(n_types):  # share one table between (i, j) and (j, i)
            for j in range(i):
                pair_params[i, j] = pair_params[j, i]
        cutoff = max([p.cutoff for row in pairs for p in row] + [0.0])

        n_bond_types = int(system.bond_types.max()) + 1 if len(system.bonds) else 1
        bonds = self.bond_list(n_bond_types)
        bond_kinds = np.array([b.kind for b in bonds], dtype=np.int64)
        bond_params = np.array([b.row(tables) for b in bonds])
        self._check_bond_lengths(system, bonds)

        if self.bending is None:
            angles = np.zeros((0, 3), dtype=np.int64)
            angle_type = np.zeros(0, dtype=np.int64)
            angle_params = np.zeros((1, 1))
        else:
            n_angle_types = int(system.angle_types.max()) + 1 if len(system.angles) else 1
            angles, angle_type = system.angles, system.angle_types
            angle_params = np.array([[b.stiffness] for b in self.bending_list(n_angle_types)])

        width = max([t.n_points for t in tables] + [2])
        table_arr = np.zeros((max(len(tables), 1), width, 2))
        for k, t in enumerate(tables):
            table_arr[k, :t.n_points] = t.values
        bond_order, bond_start = K.bond_chunks(system.bonds, system.n_beads)
        arrays = (pair_kinds, pair_params, table_arr, system.bonds, system.bond_types, bond_kinds,
                  bond_params, angles, angle_type, angle_params, bond_order, bond_start)
        excl_start, excl = self.exclusions(system)
        return CompiledForceField(arrays, cutoff, excl_start, excl)

    def exclusions(self, system):
        """Excluded non-bonded partners in compressed rows: int64 (n+1,), (m,)."""
        n = system.n_beads
        pairs = [np.zeros((0, 2), dtype=np.int64)]
        if self.exclude in ("bonded", "bonded_and_angles"):
            pairs.append(system.bonds)
        if self.exclude == "bonded_and_angles":
            pairs.append(system.angles[:, [0, 2]])
        p = np.concatenate(pairs)
        p = np.concatenate([p, p[:, ::-1]])
        p = np.unique(p, axis=0)
        start = np.zeros(n + 1, dtype=np.int64)
        np.add.at(start, p[:, 0] + 1, 1)
        return np.cumsum(start), np.ascontiguousarray(p[:, 1])

    @staticmethod
    def _check_bond_lengths(system, bonds):
        if not len(system.bonds):
            return
        d = system.positions[system.bonds[:, 1]] - system.positions[system.bonds[:, 0]]
        if system.box.periodic:
            d -= system.box.lengths * np.rint(d / system.box.lengths)
        r = np.linalg.norm(d, axis=1)
        limits = np.array([bonds[t].max_length for t in system.bond_types])
        bad = np.flatnonzero(r >= limits)
        if bad.size:
            b = bad[0]
            raise InputError(f"bond {b} (beads {system.bonds[b, 0]}-{system.bonds[b, 1]}) is {r[b]:.4f} sigma "
                             f"long, not shorter than its potential allows ({limits[b]:.4f}); raise FENE "
                             "max_extension (R0) or build the chain with shorter bonds")
