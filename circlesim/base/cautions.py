"""The standing cautions every front end shows."""

CAUTION = (
    "Planning and teaching aid, not a medical device. Predictions come from a population "
    "model and can be wrong for an individual patient. Always monitor inspired and end-tidal "
    "oxygen and agent with a calibrated gas analyser. Local policy, the agent's product "
    "labelling and the responsible clinician's licensed practice decide."
)

__all__ = ["CAUTION"]
