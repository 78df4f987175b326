"""Solver tests that take the ``engine`` fixture run once per solver engine: the compiled
kernel (the default) and the numpy reference implementation."""
import pytest

from geoflow.hydraulics.solver import ENGINES


@pytest.fixture(params=ENGINES)
def engine(request):
    return request.param
