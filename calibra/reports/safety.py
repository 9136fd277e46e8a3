"""Safety cautions printed on every field checklist, each with the source it rests on.

The wording is ours; the sources are named as the project's reference notes give them.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Caution:
    """One caution for the crew and the published sources behind it."""

    text: str
    sources: str


SAFETY_CAUTIONS: tuple[Caution, ...] = (
    Caution("Work only as qualified personnel, under the utility's own switching and safety "
            "procedures and the local codes; those rules govern over anything on this sheet.",
            "employer's procedures; local codes"),
    Caution("Before touching any conductor, establish an electrically safe work condition: "
            "identify every source, open it, verify the opening, apply lockout/tagout, test "
            "for absence of voltage, and ground where required.",
            "NFPA 70E §120.5; OSHA 29 CFR 1910.333(b)"),
    Caution("Never open the secondary circuit of a CT while its primary may carry current. "
            "Short the secondary at the test switch or terminal block first; an open CT "
            "secondary can rise to a dangerous voltage.",
            "OSHA 29 CFR 1910.269; UFC 3-560-01 §9-5.2"),
    Caution("Never short a VT secondary: the winding overheats. Pull the VT secondary fuses "
            "before replacing a primary fuse, and do not take a dead secondary as proof that "
            "the primary is dead.",
            "MIL-HDBK-1025/10 §6.8.1"),
    Caution("Each instrument-transformer secondary circuit is grounded at one point only; "
            "do not add or remove grounds while checking the wiring.",
            "IEEE C57.13.3"),
    Caution("The findings on this sheet come from software analysis of telemetry and are "
            "advisory: confirm each one in the field before changing wiring or settings.",
            "calibra"),
)
