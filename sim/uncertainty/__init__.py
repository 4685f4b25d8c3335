"""Parameter uncertainty as data: distributions for uncertain inputs (fitted from a mean and standard
error by the method of moments) and the value-of-information statistics computed from per-draw net
benefits. Pure numpy/scipy/pandas; knows nothing of the model (``sim.psa`` applies draws to it)."""

from .distributions import (Beta, Distribution, DistributionError, Gamma, LogNormal, Normal, Triangular, Uniform,
                            Univariate)
from .groups import TRANSFORMS, Dirichlet, Group, MultivariateNormal
from .moments import (MOMENT_FITS, beta_from_mean_se, dirichlet_from_shares, gamma_from_mean_se,
                      lognormal_from_interval, lognormal_from_mean_se, mvn_from_correlation, normal_from_mean_se)
from .sampling import UncertainInput, draw_table, group_uniforms

__all__: list[str] = [
    # distributions of uncertain inputs and their reproducible draws
    "Distribution", "Univariate", "Group", "Beta", "Gamma", "LogNormal", "Normal", "Uniform", "Triangular",
    "Dirichlet", "MultivariateNormal", "TRANSFORMS", "DistributionError", "MOMENT_FITS", "beta_from_mean_se",
    "gamma_from_mean_se", "lognormal_from_mean_se", "normal_from_mean_se", "dirichlet_from_shares",
    "UncertainInput", "draw_table", "group_uniforms", "lognormal_from_interval", "mvn_from_correlation",
]

# decision uncertainty and the value of information, from per-draw tables (one row per draw and strategy)
from .acceptability import acceptability_curve, acceptability_frontier, best_indicator
from .convergence import inb_convergence, running_mean
from .evppi import IncrementalFits, evppi, evppi_from_fits, fit_incremental_means
from .method_comparison import compare_acceptability, compare_evpi, differing_wtp_ranges, per_method
from .net_benefit import ce_plane, incremental_analysis, incremental_results, net_benefit
from .noise import incremental_draws, noise_share, patients_for_noise_share
from .regression_splines import SplineBasis, SplineFit
from .value_of_information import evpi, evpi_from_net_benefit, population_evpi, population_factor

__all__ += [
    "net_benefit", "incremental_results", "incremental_analysis", "ce_plane", "acceptability_curve",
    "acceptability_frontier", "best_indicator", "evpi", "evpi_from_net_benefit", "population_factor",
    "population_evpi", "SplineBasis", "SplineFit", "IncrementalFits", "fit_incremental_means", "evppi",
    "evppi_from_fits", "incremental_draws", "noise_share", "patients_for_noise_share", "running_mean",
    "inb_convergence", "per_method", "compare_acceptability", "compare_evpi", "differing_wtp_ranges",
]
