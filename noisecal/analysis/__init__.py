"""Analysis: statistics of data (Allan-family deviations, EDF, PSD). Knows nothing of filters."""
