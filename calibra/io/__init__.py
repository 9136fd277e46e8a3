"""Reading a site folder (network, point list, snapshots) and IEEE Common Data Format files."""

from calibra.io.cdf import CdfCase, CdfFormatError, read_cdf
from calibra.io.site_folder import SiteHistory, load_site, open_history
from calibra.io.site_summary import site_summary_lines, summarize
from calibra.io.snapshot_size import MEMORY_LIMIT_ENV, memory_limit

__all__ = ["MEMORY_LIMIT_ENV", "CdfCase", "CdfFormatError", "SiteHistory", "load_site",
           "memory_limit", "open_history", "read_cdf", "site_summary_lines", "summarize"]
