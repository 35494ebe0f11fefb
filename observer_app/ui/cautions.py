"""The cautions every screen that opens a study shows: observation data is about people."""
from __future__ import annotations

CAUTIONS: tuple[str, ...] = (
    "Observe only with the consent the study requires and with ethics approval in place.",
    "These records are personal data about learners, who are often minors: keep the study "
    "folder on an encrypted device and share it with no one outside the study.",
    "De-identify before sharing: export with pseudonymous IDs and never put full names in labels.",
    "Detectors trained on these codes must never be the sole basis for a decision about a person.",
    "Local law and your review board decide what is allowed; this tool does not.",
)


def cautions_html() -> str:
    return "<ul>" + "".join(f"<li>{line}</li>" for line in CAUTIONS) + "</ul>"
