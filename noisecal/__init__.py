"""noisecal: noise models with confidence intervals for Kalman filters.

The package follows one data flow: ``ingest`` reads a file into a
:class:`~noisecal.types.Recording`; ``analysis`` computes statistics of it;
``fit`` turns statistics into noise models and filter matrices; ``export``
writes what the user keeps; ``jobs`` holds one pipeline per use case.
"""

__version__ = "0.1.0"

_API = ("read", "static", "motion", "odometry", "targets", "recheck", "filter",
        "consistency", "batch", "fleet", "ros_parameters", "ParameterError")


def __getattr__(name: str):
    # The entry points load on first use: `import noisecal` stays cheap for the CLI.
    if name in _API:
        from . import api

        return getattr(api, name)
    raise AttributeError(f"module 'noisecal' has no attribute {name!r}")


def __dir__():
    return sorted(list(globals()) + list(_API))
