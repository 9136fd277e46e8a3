"""Reading a site folder (network, point list, snapshots) and IEEE Common Data Format files."""

from calibra.io.cdf import CdfCase, CdfFormatError, read_cdf
from calibra.io.site_folder import load_site, summarize
from calibra.io.snapshot_size import MEMORY_LIMIT_ENV, memory_limit

__all__ = ["MEMORY_LIMIT_ENV", "CdfCase", "CdfFormatError", "load_site", "memory_limit",
           "read_cdf", "summarize"]
