import pathlib

import pytest

import freqpair
from freqpair.design.files import BUILTIN_EXAMPLE

ROOT = pathlib.Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))


@pytest.fixture
def builtin_design():
    return freqpair.design_from_text(BUILTIN_EXAMPLE)


@pytest.fixture(params=EXAMPLES, ids=[p.stem for p in EXAMPLES])
def example_path(request):
    return request.param


# ---------------------------------------------------------------- hypothesis profiles
# "ci" (default): derandomized, enough examples that the property tests run
# >= 2,000 in total. "deep": 10,000 examples per property test, fresh random
# examples each run; select with FREQPAIR_HYPOTHESIS_PROFILE=deep.
import os as _os

from hypothesis import HealthCheck as _HealthCheck
from hypothesis import settings as _settings

_settings.register_profile(
    "ci", max_examples=250, deadline=None, derandomize=True, database=None,
    suppress_health_check=[_HealthCheck.too_slow, _HealthCheck.data_too_large])
_settings.register_profile(
    "deep", max_examples=10_000, deadline=None,
    suppress_health_check=[_HealthCheck.too_slow, _HealthCheck.data_too_large])
_settings.load_profile(_os.environ.get("FREQPAIR_HYPOTHESIS_PROFILE", "ci"))
