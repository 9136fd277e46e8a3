from tests.io.conftest import files  # noqa: F401  (the loader tests' small valid site)
