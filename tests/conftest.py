import pytest  # noqa: E402

import calibra  # noqa: F401  (sets single-threaded BLAS before numpy loads)


@pytest.fixture(scope="session")
def sample_exports(tmp_path_factory):
    """The sample site written as a utility's three exports (about 35 s, once per session):
    (folder, ExportRecord)."""
    from calibra.simulate.sample_exports import write_sample_exports

    out = tmp_path_factory.mktemp("sample-exports")
    return out, write_sample_exports(out)
