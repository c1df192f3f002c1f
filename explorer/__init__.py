"""Fulcrum: where two treatments break even along a patient index."""
__version__ = "0.1.0"

CAUTIONS = (
    "Fulcrum is a research and discussion aid built from the loaded cohort, not a medical device.",
    "Its estimates are only as good as the cohort and the models fitted to it.",
    "Decisions rest with the treating team and the patient, under local protocols and licensed practice.",
)
