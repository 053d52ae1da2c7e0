"""The one chi^2 test of a fit: its p-value and the threshold below which a fit is poor.

The start uses it to stop polishing candidates once one fits acceptably; the summary's
``fit_quality`` verdict (:func:`massfit.summarise.adequacy.fit_quality`), the report,
the figures and the exit status all read the same numbers from :func:`chi2_block`.
"""

from __future__ import annotations

__all__ = ["POOR_FIT_P_VALUE", "chi2_block", "is_poor"]

#: Below this chi^2 p-value the best fit is called poor (about 3.7 sigma).
POOR_FIT_P_VALUE = 1e-4


def chi2_block(chi2, n_values, n_params) -> dict:
    """chi^2, the number of values, its reduced value and p-value over n - k degrees of
    freedom (None where there are no more values than parameters)."""
    from scipy.stats import chi2 as chi2_dist

    dof = n_values - n_params
    return {"chi2": chi2, "n_values": int(n_values),
            "reduced_chi2": chi2 / dof if dof > 0 else None,
            "p_value": float(chi2_dist.sf(chi2, dof)) if dof > 0 else None}


def is_poor(chi2, n_values, n_params) -> bool:
    """True where chi^2 is improbable (p below :data:`POOR_FIT_P_VALUE`) for the errors."""
    p_value = chi2_block(chi2, n_values, n_params)["p_value"]
    return p_value is not None and p_value < POOR_FIT_P_VALUE
