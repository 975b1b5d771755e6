"""The cautions printed with every result (CLI, reports, README)."""

CAUTION = (
    "Caution: these numbers hold only under the stated proof assumptions and device model. "
    "They are design aids, not a certificate. A deployed system needs an independent security "
    "evaluation under the applicable standards and certification schemes."
)

#: The same caution, short enough for one line at the foot of a figure (the full text rides in the figure
#: file's metadata as well).
FIGURE_CAUTION = (
    "Caution: design aid, valid only under the stated proof assumptions and device model; not a certificate. "
    "Deployed systems need an independent security evaluation."
)
