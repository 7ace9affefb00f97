import pytest
from models_tables import make_tables


@pytest.fixture
def tables():
    return make_tables()
