"""Data-quality measures that ignore the contrast between conditions."""

import numpy as np

from epoch_assay.engine.stats.ttest import TRIAL_AXIS


def standardized_measurement_error(values: np.ndarray) -> np.ndarray:
    """Standardized measurement error of a mean score (Luck et al., 2021).

    Parameters
    ----------
    values : array, shape (..., n_trials, n_channels), single-trial scores of one
        condition (e.g. window means), in V

    Returns
    -------
    array, shape (..., n_channels), in V: the SD of the single-trial scores (ddof 1)
    divided by √n_trials, the standard error of the condition's mean score.
    """
    n_trials = values.shape[TRIAL_AXIS]
    if n_trials < 2:
        raise ValueError(f"the standardized measurement error needs at least 2 trials, got {n_trials}")
    return values.std(axis=TRIAL_AXIS, ddof=1) / np.sqrt(n_trials)
