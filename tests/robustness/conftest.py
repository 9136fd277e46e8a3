import pytest

from tests.io.site_builder import SiteFiles


@pytest.fixture
def files() -> SiteFiles:
    """A fresh copy of the small valid site of the loader tests, to mutate and write."""
    return SiteFiles()
