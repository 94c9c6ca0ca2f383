"""noisecal: noise models with confidence intervals for Kalman filters.

The package follows one data flow: ``ingest`` reads a file into a
:class:`~noisecal.types.Recording`; ``analysis`` computes statistics of it;
``fit`` turns statistics into noise models and filter matrices; ``export``
writes what the user keeps; ``jobs`` holds one pipeline per use case.
"""

__version__ = "0.1.0"
