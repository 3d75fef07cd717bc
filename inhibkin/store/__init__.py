"""The results store: campaigns with their provenance, a compound's history, the MSR."""

from .msr import MSREstimate, MSRResult, minimum_significant_ratio
from .results import TABLES, ResultStore, StoredCampaign, StoreError, write_campaign

__all__ = ["MSREstimate", "MSRResult", "ResultStore", "StoreError", "StoredCampaign", "TABLES",
           "minimum_significant_ratio", "write_campaign"]
