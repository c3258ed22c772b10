"""The cautions every human-facing output carries, written once. Wrong oil calls can wreck machines."""

CAUTIONS = (
    "Screening aid only, not a substitute for a qualified lubricant analyst.",
    "Limits from the equipment manufacturer and the lubricant supplier, local codes and site procedures "
    "take precedence.",
    "Confirm a severe finding by resampling before acting on critical equipment.",
)

# The notice a rule set carries when it gives none of its own: the same cautions as one paragraph.
DEFAULT_NOTICE = " ".join(CAUTIONS)


def caution_text(prefix: str = "") -> str:
    return "\n".join(prefix + line for line in CAUTIONS)
