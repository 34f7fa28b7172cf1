"""smle's text layout for reports: a title line, then short titled blocks of indented lines.

Every plain-text report (``FitResult.summary``, ``HealthReport.summary``, the goodness-of-fit
report) is built from these helpers, so that they read alike and a new line is one call::

    smle fit -- model sv, 2000 periods

    Estimates (standard error; 95% interval)
      mu          -7.36120   (0.04120;  -7.44195 to -7.28045)

    Simulation
      ESS: 8.0 of 64 draws (12%)
      ! ESS below 10% of the draws (common practice) ...

    Note: <caution>

A block is a title and its lines (``block``); ``field`` writes ``label: value``; ``warning``
marks a line that needs the reader's attention with a leading ``!``. ``render`` joins the title,
the blocks (a blank line between them) and the closing note. No rules, no frames.
"""

from __future__ import annotations

from typing import Iterable

INDENT = "  "
WARNING_MARK = "! "


def title(kind: str, *facts: str) -> str:
    """The first line of a report: ``smle <kind> -- fact, fact``."""
    return f"smle {kind}" + (f" -- {', '.join(facts)}" if facts else "")


def field(label: str, value) -> str:
    """One ``label: value`` line."""
    return f"{label}: {value}"


def warning(text: str) -> str:
    """A line that asks for attention (a stated threshold was crossed)."""
    return WARNING_MARK + text


def block(heading: str, lines: Iterable[str]) -> list[str]:
    """A titled block: the heading, then its lines indented (empty when there are no lines)."""
    body = [INDENT + line if line else "" for line in lines]
    return [heading, *body] if body else []


def render(first_line: str, blocks: Iterable[list[str]], note: str | None = None) -> str:
    """The whole report: first line, the non-empty blocks separated by blank lines, the note last."""
    parts = [[first_line]] + [b for b in blocks if b]
    if note:
        parts.append([f"Note: {note}"])
    return "\n\n".join("\n".join(part) for part in parts)


def warnings_in(text: str) -> list[str]:
    """The warning lines of a rendered report, without their mark (used by tests and callers)."""
    return [line.strip()[len(WARNING_MARK):] for line in text.splitlines() if line.strip().startswith(WARNING_MARK)]
