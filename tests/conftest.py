import calibra  # noqa: F401  (sets single-threaded BLAS before numpy loads)
