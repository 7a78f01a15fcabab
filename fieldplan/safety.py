"""Short field cautions printed with every plan.

They are reminders, not advice: local regulations, product labels and licensed
agronomic practice always take precedence. A user may replace them with their
own list (``fieldplan plan --cautions FILE``, one caution per line); the list a
plan carries is recorded in its manifest.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "CAUTIONS",
    "MAX_CAUTIONS",
    "MAX_CAUTION_CHARS",
    "cautions_text",
    "load_cautions",
    "plan_cautions",
    "set_cautions",
]

CAUTIONS: list[str] = [
    "Check spray records and pesticide re-entry intervals for every block before sending crews in.",
    "Heat: carry water, take shade breaks, start early on hot days.",
    "Watch for moving machinery, and uneven ground, holes, ditches and trellis wires.",
    "Before any mechanised probe or auger deeper than hand depth, have buried services located "
    "through the local utility-locate service.",
    "Follow local regulations and licensed agronomic practice; they override this plan.",
]

# Cautions are read on a phone at the block edge: a short list of short lines.
MAX_CAUTIONS = 12
MAX_CAUTION_CHARS = 240


def cautions_text(cautions: list[str] | None = None, *, bullet: str = "- ") -> str:
    """Return the cautions as plain text, one per line."""
    return "\n".join(bullet + line for line in (CAUTIONS if cautions is None else cautions))


def load_cautions(path: str | Path) -> list[str]:
    """Read a cautions file: UTF-8 text, one caution per line; blank lines and ``#`` lines skipped.

    Raises
    ------
    fieldplan.errors.InputError
        If the file is missing or unreadable, holds no caution, or too many or too long ones.
    """
    from fieldplan.errors import InputError

    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{path}: cautions file not found; check the path") from None
    except (OSError, UnicodeDecodeError) as err:
        raise InputError(f"{path}: cannot read the cautions file ({err}); save it as UTF-8 text") from None
    lines = [" ".join(line.split()) for line in text.splitlines()]
    lines = [line for line in lines if line and not line.startswith("#")]
    if not lines:
        raise InputError(f"{path}: holds no caution; write one caution per line (a plan must carry some)")
    if len(lines) > MAX_CAUTIONS:
        raise InputError(f"{path}: {len(lines)} cautions; keep at most {MAX_CAUTIONS} so crews read them all")
    for number, line in enumerate(lines, start=1):
        if len(line) > MAX_CAUTION_CHARS:
            raise InputError(
                f"{path}: caution {number} has {len(line)} characters; keep each under "
                f"{MAX_CAUTION_CHARS} (split it into two lines)"
            )
    return lines


def plan_cautions(plan) -> list[str]:
    """The cautions a plan carries: those in its manifest, else :data:`CAUTIONS`."""
    meta = getattr(plan, "meta", None) or {}
    cautions = meta.get("cautions")
    return [str(c) for c in cautions] if cautions else list(CAUTIONS)


def set_cautions(plan, path: str | Path | None = None):
    """Record the cautions ``plan`` carries in its manifest (from ``path`` or the defaults)."""
    if path is None:
        plan.meta["cautions"] = list(CAUTIONS)
        plan.meta["cautions_source"] = "default"
    else:
        plan.meta["cautions"] = load_cautions(path)
        plan.meta["cautions_source"] = str(path)
    return plan
