"""The usual cautions, in one place: the window, the report and the README say the same."""

CAUTION_LINES = (
    "A surrogate tree is an approximation of the model, and the model is not a diagnosis, a "
    "credit decision or an insurance decision.",
    "Fidelity is measured on the data given to this review, and only there.",
    "The rules describe the model; they do not replace the model's own validation "
    "(discrimination, calibration, stability, fairness, data quality).",
    "Use follows local regulation and licensed professional practice.",
)
CAUTIONS = " ".join(CAUTION_LINES)
