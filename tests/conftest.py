import pathlib

import pytest

import freqpair
from freqpair.design import BUILTIN_EXAMPLE

ROOT = pathlib.Path(__file__).resolve().parent.parent
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))


@pytest.fixture
def builtin_design():
    return freqpair.design_from_text(BUILTIN_EXAMPLE)


@pytest.fixture(params=EXAMPLES, ids=[p.stem for p in EXAMPLES])
def example_path(request):
    return request.param
