"""The cautions printed with every result (CLI, reports, README)."""

CAUTION = (
    "Caution: these numbers hold only under the stated proof assumptions and device model. "
    "They are design aids, not a certificate. A deployed system needs an independent security "
    "evaluation under the applicable standards and certification schemes."
)
