"""The cautions every human-facing output of limbclock carries."""

CAUTION_LINES = (
    "CAUTION: never look at the Sun without an adequate shade glass.",
    "A fix from this instrument is a backup: cross-check it with every other means, keep a",
    "dead-reckoning plot, and follow official charts, local regulations and prudent seamanship.",
)

CAUTION_TEXT = "\n".join(CAUTION_LINES)
CAUTION_SHORT = ("Never view the Sun without an adequate shade glass. Backup method only: cross-check, "
                 "keep a DR plot, follow official charts, local regulations and prudent seamanship.")
