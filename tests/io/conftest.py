import pytest

from tests.io.site_builder import SiteFiles


@pytest.fixture
def files() -> SiteFiles:
    """A fresh copy of the valid invented site, to mutate and write."""
    return SiteFiles()
