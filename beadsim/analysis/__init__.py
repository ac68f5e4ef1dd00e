"""Analysis of bead-spring trajectories: sizes, shapes, scattering, bonds, dynamics, statistics, scaling, B2.

Two levels of functions:

* array level, e.g. ``radius_of_gyration(positions, chains)``: positions as
  float64 arrays shaped ``(n_frames, n_beads, 3)`` in any length unit, chains as
  a sequence of integer index arrays in backbone order;
* trajectory level, ``compute_<quantity>(traj, ...)``: an
  :class:`mdtraj.Trajectory` in, per-frame (and per-chain) arrays out, chains
  found in the bond graph and made whole across periodic boundaries, lengths in
  nm or, with ``length_scale`` (nm per sigma), in sigma.

:func:`analyze_file` runs the standard set on a file and writes tables and
figures; :func:`format_table` prints its summary.
"""

from .bonds import (PersistenceFit, bond_angles, bond_correlation, bond_lengths, compute_bond_angles,
                    compute_bond_lengths, distribution, persistence_length)
from .dynamics import (DiffusionFit, RelaxationTime, center_of_mass_msd, center_of_mass_paths,
                       compute_end_to_end_autocorrelation, compute_msd, diffusion_coefficient, inner_bead_msd,
                       mean_square_displacement, relaxation_time, vector_autocorrelation)
from .internal import compute_internal_distances, effective_exponent, internal_distances
from .report import analyze_file, format_table
from .scaling import (ExponentFit, PowerLawFit, fit_power_law, nu_from_chain_size, nu_from_form_factor,
                      nu_from_internal_distances)
from .scattering import (GuinierFit, StructureFactor, compute_form_factor, compute_structure_factor,
                         debye_function, form_factor, guinier_rg, histogram_error_bound, kratky,
                         structure_factor)
from .size import (Shape, compute_end_to_end, compute_hydrodynamic_radius, compute_rg, compute_shape,
                   end_to_end_distance, end_to_end_vector, gyration_tensor, hydrodynamic_radius,
                   mean_square_ratio, radius_of_gyration, shape_descriptors)
from .stats import (Blocking, Inefficiency, Summary, blocking, detect_equilibration, effective_sample_count,
                    inefficiency_estimate, statistical_inefficiency, summarize)
from .trajectory import find_chains, is_periodic, load_trajectory, trajectory_positions, unwrap_chains
from .virial import SecondVirial, compute_second_virial

__all__ = [
    "Blocking", "DiffusionFit", "ExponentFit", "GuinierFit", "Inefficiency", "PersistenceFit", "PowerLawFit",
    "RelaxationTime",
    "SecondVirial", "Shape", "StructureFactor", "Summary", "analyze_file", "blocking", "bond_angles",
    "bond_correlation", "bond_lengths", "center_of_mass_msd", "center_of_mass_paths", "compute_bond_angles",
    "compute_bond_lengths", "compute_end_to_end", "compute_end_to_end_autocorrelation", "compute_form_factor",
    "compute_hydrodynamic_radius", "compute_internal_distances", "compute_msd", "compute_rg",
    "compute_second_virial", "compute_shape",
    "compute_structure_factor", "debye_function", "detect_equilibration", "diffusion_coefficient",
    "distribution", "effective_exponent", "effective_sample_count", "end_to_end_distance", "end_to_end_vector",
    "find_chains", "fit_power_law", "form_factor", "format_table", "guinier_rg", "gyration_tensor",
    "histogram_error_bound", "hydrodynamic_radius", "inefficiency_estimate", "inner_bead_msd", "internal_distances",
    "is_periodic",
    "kratky", "load_trajectory", "mean_square_displacement", "mean_square_ratio", "nu_from_chain_size",
    "nu_from_form_factor", "nu_from_internal_distances", "persistence_length", "radius_of_gyration",
    "relaxation_time", "shape_descriptors", "statistical_inefficiency", "structure_factor", "summarize",
    "trajectory_positions", "unwrap_chains", "vector_autocorrelation",
]
