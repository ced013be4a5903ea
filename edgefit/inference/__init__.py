"""Layer 4: inference -- datasets prepared for fitting, the joint Poisson
likelihood, best fits, profile-likelihood intervals, MCMC posteriors,
goodness of fit and derived quantities."""
from .dataset import Dataset, parse_ranges
from .derived import derived_quantities
from .fit import fit_sightline
from .goodness import c_statistic_goodness, posterior_predictive
from .intervals import delta_statistic, profile_interval, profile_intervals
from .likelihood import JointLikelihood, ParameterVector
from .mcmc import GaussianPrior, LogPosterior, LogUniformPrior, run_mcmc
from .result import FitResult, Interval

__all__ = ["Dataset", "parse_ranges", "derived_quantities", "fit_sightline", "c_statistic_goodness",
           "posterior_predictive", "delta_statistic", "profile_interval", "profile_intervals",
           "JointLikelihood", "ParameterVector", "GaussianPrior", "LogPosterior",
           "LogUniformPrior", "run_mcmc", "FitResult", "Interval"]
