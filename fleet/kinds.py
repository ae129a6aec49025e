"""Pump kinds, maintenance event kinds and other closed vocabularies shared by every layer."""

# Roles of people who sign in, least to most trusted; each may do what the ones before it may.
ROLES = ("viewer", "technician", "engineer")

PUMP_KINDS: dict[str, str] = {
    "external_gear": "External gear",
    "internal_gear": "Internal gear",
    "gerotor": "Gerotor",
    "lobe": "Lobe",
    "vane": "Vane",
    "axial_piston": "Axial piston",
    "radial_piston": "Radial piston",
}

PISTON_KINDS = frozenset({"axial_piston", "radial_piston"})

# Maintenance events. Those in RESETS_INTERVAL start a new service interval: trends never cross them.
EVENT_KINDS: dict[str, str] = {
    "overhaul": "Overhaul",
    "replacement": "Replacement",
    "seal_repair": "Seal repair",
    "shaft_repair": "Shaft repair",
    "filter_change": "Filter change",
    "oil_change": "Oil change",
    "inspection": "Inspection",
}
RESETS_INTERVAL = frozenset({"overhaul", "replacement"})

READING_SOURCES = ("form", "import", "api")

# Failure modes for an overhaul record (ISO 14224 style wording, our own list).
FAILURE_MODES = (
    "low_output",
    "internal_leakage",
    "external_leakage",
    "noise",
    "overheating",
    "vibration",
    "seizure",
    "other",
)


def normalise_kind(text: str) -> str | None:
    """Map free spellings ('Axial piston', 'axial-piston') to a kind key; None if unknown."""
    key = text.strip().lower().replace("-", "_").replace(" ", "_")
    return key if key in PUMP_KINDS else None
