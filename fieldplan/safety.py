"""Short field cautions printed with every plan.

They are reminders, not advice: local regulations, product labels and licensed
agronomic practice always take precedence.
"""

from __future__ import annotations

__all__ = ["CAUTIONS", "cautions_text"]

CAUTIONS: list[str] = [
    "Check spray records and pesticide re-entry intervals for every block before sending crews in.",
    "Heat: carry water, take shade breaks, start early on hot days.",
    "Watch for moving machinery, and uneven ground, holes, ditches and trellis wires.",
    "Before any mechanised probe or auger deeper than hand depth, have buried services located "
    "through the local utility-locate service.",
    "Follow local regulations and licensed agronomic practice; they override this plan.",
]


def cautions_text(cautions: list[str] | None = None, *, bullet: str = "- ") -> str:
    """Return the cautions as plain text, one per line."""
    return "\n".join(bullet + line for line in (CAUTIONS if cautions is None else cautions))
