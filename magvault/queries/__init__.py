"""Pure statistics behind magvault's collection queries.

The vault's SQL fetches rows (primary transitions of one kind on one branch
over current runs, specimen properties, treatments); the functions here turn
them into per-specimen estimates, shifts against a reference, coupled
transitions and correlations.  pandas and numpy only: no database code.
"""

from magvault.queries.correlate import (
    CorrelationResult,
    composition_map,
    correlate,
    field_angle_to_c_deg,
)
from magvault.queries.coupled import coupled
from magvault.queries.shifts import (
    GROUPINGS,
    MODES,
    SHIFT_COLUMNS,
    field_bin_label,
    shifts,
    specimen_estimates,
    to_records,
)
from magvault.queries.stats import (
    MAD_TO_SIGMA,
    MEDIAN_STANDARD_ERROR_FACTOR,
    GroupedWeightedMeans,
    LeaveOneOutFits,
    LinearFit,
    WeightedMean,
    grouped_weighted_means,
    leave_one_out_linear_fits,
    leave_one_out_median_mad,
    robust_scale,
    two_sided_p,
    weighted_linear_fit,
    weighted_mean,
)

__all__ = [
    "GROUPINGS", "MAD_TO_SIGMA", "MEDIAN_STANDARD_ERROR_FACTOR", "MODES", "SHIFT_COLUMNS",
    "CorrelationResult", "GroupedWeightedMeans", "LeaveOneOutFits", "LinearFit", "WeightedMean",
    "composition_map", "correlate", "coupled", "field_angle_to_c_deg", "field_bin_label",
    "grouped_weighted_means", "leave_one_out_linear_fits", "leave_one_out_median_mad",
    "robust_scale", "shifts", "specimen_estimates", "to_records", "two_sided_p",
    "weighted_linear_fit", "weighted_mean",
]
