"""The static block's text: the same from libyaml's emitter as from PyYAML's own."""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from noisecal.export import yaml_block
from noisecal.ingest.yaml_file import GuardedLoader, quote_for_loader


@pytest.fixture(scope="module")
def result():
    """Two channels, one named like a number, fitted by the static job."""
    import noisecal
    from noisecal.fit.simulate import simulate_rate

    rng = np.random.default_rng(8)
    cols = {name: simulate_rate(np.array([0, 1e-6, 0, 1e-9, 0]), 0.01, 8192, rng)
            for name in ("gyro_x", "1e3")}
    rec = noisecal.read(cols, period=0.01, units={c: "rad/s" for c in cols})
    return noisecal.static(rec, reps=20, seed=4)


def _pure_python_dumper():
    class Reference(yaml.SafeDumper):
        pass

    Reference.add_representer(list, yaml_block._represent_list)
    return quote_for_loader(Reference)


@pytest.mark.skipif(not hasattr(yaml, "CSafeDumper"), reason="PyYAML built without libyaml")
def test_libyaml_text_equals_the_pure_python_emitters(result, monkeypatch):
    """Reference library: PyYAML's pure-Python emitter (yaml.SafeDumper) writes the
    same block, byte for byte, as the libyaml emitter the block uses."""
    assert issubclass(yaml_block._Dumper, yaml.CSafeDumper)
    fast = yaml_block.render(result.sections)
    monkeypatch.setattr(yaml_block, "_Dumper", _pure_python_dumper())
    reference = yaml_block.render(result.sections)
    assert fast == reference


def test_a_name_read_as_a_number_stays_a_name(result):
    """YAML 1.2 core schema (yaml.org/spec/1.2.2, 10.3.2): plain 1e3 is a float, so the
    channel named "1e3" must be written quoted to come back as text."""
    text = yaml_block.render(result.sections)
    doc = yaml.load(text, Loader=GuardedLoader)
    assert set(doc["channels"]) == {"gyro_x", "1e3"}
    assert yaml_block.verify(doc) == "ok"
