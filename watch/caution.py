"""The one wording of the caution that accompanies every factor of safety we show."""

CAUTION = (
    "Caution: factors of safety are decision support only. They depend on the model and its "
    "inputs and do not replace a qualified engineer's judgement or local codes."
)

#: Short form for figures, where space is tight.
CAUTION_SHORT = (
    "Decision support only: results depend on the model and inputs; "
    "they do not replace a qualified engineer's judgement or local codes."
)
