"""The C kernels against the numba kernels they stand in for."""

import os

import pytest

from noisecal import _native

requires_native = pytest.mark.skipif(
    not _native.enabled() and os.environ.get("CI") != "true",
    reason="noisecal's C kernels are not built here (under CI=true these tests run and "
           "fail instead: a skip would hide a broken build behind the numba fallback)")
