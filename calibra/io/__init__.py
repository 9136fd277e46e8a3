"""Reading a site folder (network, point list, snapshots) and IEEE Common Data Format files."""

from calibra.io.cdf import CdfCase, CdfFormatError, read_cdf
from calibra.io.site_folder import load_site, summarize

__all__ = ["CdfCase", "CdfFormatError", "load_site", "read_cdf", "summarize"]
