"""The cautions Harken carries wherever its results are shown (the dashboard's footer and About page, reports)."""

__all__ = ["CAUTIONS"]

CAUTIONS = (
    "Acoustic monitoring supports investigation and trending; it does not replace compendial release tests or "
    "the site's quality system.",
    "A verdict recorded in Harken is not a batch disposition.",
    "Use in a regulated (GMP) setting needs the site's own computerised-system validation.",
    "Recordings of impacts can be loud: playback starts at a low volume.",
)
