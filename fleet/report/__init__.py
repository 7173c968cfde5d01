"""Report writers: the files program managers, procurement and GIS users open.

These modules do I/O only.  They take plain pandas DataFrames, dicts and
matplotlib figures that the core already computed, compute no physics, and
write to the path they are given (the caller makes the run folder).

* :func:`write_bill_of_materials` - ``bill_of_materials.xlsx``
* :func:`write_deployment_summary` - ``deployment_summary.xlsx``
* :func:`write_deployment_html` - ``deployment_summary.html``
* :func:`write_sites_gpkg` - ``sites.gpkg``
* :mod:`fleet.report.plots` - figure builders for the HTML report
"""

from ._common import DEFAULT_CAUTIONS, restore_text, safe_text
from .excel import read_bill_of_materials, write_bill_of_materials, write_deployment_summary
from .gpkg import write_sites_gpkg
from .html import write_deployment_html
from .plots import cost_by_kit_type, reliability_histogram, site_map, soc_trace

__all__ = [
    "DEFAULT_CAUTIONS",
    "cost_by_kit_type",
    "read_bill_of_materials",
    "reliability_histogram",
    "restore_text",
    "safe_text",
    "site_map",
    "soc_trace",
    "write_bill_of_materials",
    "write_deployment_html",
    "write_deployment_summary",
    "write_sites_gpkg",
]
