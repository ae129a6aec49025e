"""Run the trend engine on stored data and keep its latest results, so pages read instead of recomputing.

compute: the engine on stored data, read only. store: keep results, service lives and fleet life figures, with
data versions. refresh: bring stale analyses up to date. records: the stored results as the JSON contract.
"""

from fleet.services.analysis.compute import (
    CHUNK_PUMPS,
    Computed,
    analyse,
    analyse_results,
    stored_priors,
)
from fleet.services.analysis.records import analysis_records, pump_ids_for, statuses
from fleet.services.analysis.refresh import any_stale, bring_up_to_date, reanalyse, refresh_analysis, stale_pumps
from fleet.services.analysis.store import CONTRACT_FIELDS, RefreshSummary

__all__ = [
    "CHUNK_PUMPS", "any_stale", "CONTRACT_FIELDS", "Computed", "RefreshSummary", "analyse", "analyse_results",
    "analysis_records", "bring_up_to_date", "pump_ids_for", "reanalyse", "refresh_analysis",
    "stale_pumps", "statuses", "stored_priors",
]
