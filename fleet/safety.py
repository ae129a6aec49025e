"""The cautions shown wherever fleet leads someone to work on a pump: one text for the pages and the terminal."""

CAUTION_TITLE = "Before you work on a pump"
CAUTIONS = (
    "Isolate and lock out the drive, and prove it dead.",
    "Relieve all pressure, accumulators included: they hold their charge after shutdown.",
    "Oil under pressure can pierce skin. An injection injury is a medical emergency, however small it looks.",
    "Hot oil and hot surfaces burn. Never close a flow tester's loading valve against an unprotected pump.",
    "Follow the equipment maker's instructions, your site's procedures and local regulations.",
)
