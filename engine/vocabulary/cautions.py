"""The cautions every human-facing output carries. Wrong oil calls can wreck machines."""

CAUTIONS = (
    "Screening aid only: not a substitute for a qualified lubricant analyst.",
    "The equipment manufacturer's and the lubricant supplier's limits, local codes and site procedures "
    "take precedence over any grade here.",
    "Confirm a severe finding by resampling before acting on critical equipment.",
)


def caution_text(prefix: str = "") -> str:
    return "\n".join(prefix + line for line in CAUTIONS)
