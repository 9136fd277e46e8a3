"""Quality codes of historian exports: one table from every code to what calibra does with it.

A code says two things: the **validity** of the value (good: used; questionable: used and
counted; bad: read as missing) and its **source** (process: measured; substituted, manual or
override: used, and reported per tag with the times, since a value typed in or forced is often
what a frozen point really is). The vocabularies understood by default:

- words, in any case: good, ok, valid, questionable, uncertain, suspect, bad, invalid,
  substituted, manual, override, and the IEC 61850-7-3 names (validity good / invalid /
  reserved / questionable; source process / substituted; the detail quality names, test,
  operatorBlocked). Several words joined by ``|`` or ``+`` combine: the worst validity and the
  one source that is not process (``questionable|substituted``).
- numbers 0–255 (and hex text ``0x00``–``0xFF``): the OPC Classic (DA) quality byte, bits 7–6
  11 good, 01 uncertain, 00 bad, 10 read as bad; 0xD8 (216, bits 7–2 110110) good, local
  override. The limit bits 1–0 are ignored.
- numbers above 255 and hex text with more than two digits (``0x40000000``): an OPC UA
  StatusCode, severity in bits 31–30: 00 good, 01 uncertain, 10 bad, 11 (reserved) read as bad.

A site whose historian writes plain decimals as OPC UA codes (Good = 0, which the byte rule
would read as bad) sets ``numeric_quality = "opc-ua"`` in ``[snapshots]``; a site's own codes
map to a class in ``[snapshots.quality]`` and are looked up first.
Sources: OPC DA quality byte and OPC UA Part 4 StatusCode severity, IEC 61850-7-3 quality
(all from memory, as listed in ``../shared/REFERENCES.md``).
"""

from __future__ import annotations

import enum
import re
from collections.abc import Mapping

import numpy as np
import pandas as pd


class Validity(enum.IntEnum):
    """How a value is used: ordered so that the worst of several is the largest."""

    GOOD = 0
    QUESTIONABLE = 1
    BAD = 2


class Source(enum.IntEnum):
    """Where a value comes from; anything but PROCESS is reported per tag."""

    PROCESS = 0
    SUBSTITUTED = 1
    MANUAL = 2
    OVERRIDE = 3


Quality = tuple[Validity, Source]
GOOD = (Validity.GOOD, Source.PROCESS)

#: The one vocabulary: every word (lower case) and what it means. IEC 61850-7-3 names from
#: memory; the plain words are common practice, no source.
WORDS: dict[str, Quality] = {
    "good": GOOD, "ok": GOOD, "valid": GOOD, "process": GOOD,
    "questionable": (Validity.QUESTIONABLE, Source.PROCESS),
    "uncertain": (Validity.QUESTIONABLE, Source.PROCESS),
    "suspect": (Validity.QUESTIONABLE, Source.PROCESS),
    "bad": (Validity.BAD, Source.PROCESS), "invalid": (Validity.BAD, Source.PROCESS),
    "reserved": (Validity.BAD, Source.PROCESS),
    "substituted": (Validity.GOOD, Source.SUBSTITUTED),
    "manual": (Validity.GOOD, Source.MANUAL),
    "override": (Validity.GOOD, Source.OVERRIDE),
    "operatorblocked": (Validity.GOOD, Source.MANUAL),
    "test": (Validity.QUESTIONABLE, Source.PROCESS),
    **{name: (Validity.QUESTIONABLE, Source.PROCESS) for name in (
        "overflow", "outofrange", "badreference", "oscillatory", "failure", "olddata",
        "inconsistent", "inaccurate")},
}
#: What ``[snapshots.quality]`` may map a code to.
CLASSES: dict[str, Quality] = {k: WORDS[k] for k in (
    "good", "questionable", "bad", "substituted", "manual", "override")}
SEPARATORS = re.compile(r"\s*[|+]\s*")
OPC_DA_OVERRIDE = 0xD8  # good, local override (OPC DA quality byte, from memory)
NUMERIC_RULES = ("auto", "opc-da", "opc-ua")


def opc_da(byte: int) -> Quality:
    """The OPC Classic (DA) quality byte (from memory): bits 7–6 11 good, 01 uncertain,
    00 bad (10 is not defined: bad); 0xD8 good, local override; limit bits 1–0 ignored."""
    if (byte & 0xFC) == OPC_DA_OVERRIDE:
        return (Validity.GOOD, Source.OVERRIDE)
    return {3: GOOD, 1: (Validity.QUESTIONABLE, Source.PROCESS)}.get(
        (byte >> 6) & 3, (Validity.BAD, Source.PROCESS))


def opc_ua(code: int) -> Quality:
    """An OPC UA StatusCode (Part 4, from memory): severity bits 31–30 00 good, 01 uncertain,
    10 bad (11 reserved: bad)."""
    severity = (code >> 30) & 3
    return {0: GOOD, 1: (Validity.QUESTIONABLE, Source.PROCESS)}.get(
        severity, (Validity.BAD, Source.PROCESS))


def _number(text: str) -> tuple[int, bool] | None:
    """(value, written in hex with more than two digits) for integer text, else None."""
    if re.fullmatch(r"0[xX][0-9a-fA-F]+", text):
        return int(text, 16), len(text) > 4
    if re.fullmatch(r"\+?\d+(?:\.0*)?", text):
        return int(float(text)), False
    return None


def classify(code: str, custom: Mapping[str, Quality] | None = None,
             numeric: str = "auto") -> Quality | None:
    """What one code means; None when it is not a known code. ``custom`` maps a site's own
    codes (exact text, then lower case); ``numeric`` is how plain numbers are read."""
    text = code.strip()
    if custom:
        found = custom.get(text, custom.get(text.lower()))
        if found is not None:
            return found
    if text == "":
        return GOOD  # no quality given: the value stands as it is
    number = _number(text)
    if number is not None:
        value, long_hex = number
        if value >= 2**32:
            return None
        if numeric == "opc-ua" or (numeric == "auto" and (value > 255 or long_hex)):
            return opc_ua(value)
        return opc_da(value) if value <= 255 else None
    parts = [p.lower() for p in SEPARATORS.split(text)]
    found = [WORDS.get(p) for p in parts]
    if not parts or any(q is None for q in found):
        return None
    validity = max(q[0] for q in found)
    sources = {q[1] for q in found} - {Source.PROCESS}
    if len(sources) > 1:
        return None  # two sources at once (manual|substituted) mean nothing
    return validity, (sources.pop() if sources else Source.PROCESS)


def classify_column(codes: pd.Series, custom: Mapping[str, Quality] | None = None,
                    numeric: str = "auto") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Validity and source per cell (int8 arrays) and a mask of unknown codes (read as bad).
    Each distinct code is classified once."""
    if pd.api.types.is_numeric_dtype(codes.dtype) and not pd.api.types.is_bool_dtype(
            codes.dtype):
        floats = codes.to_numpy(dtype=np.float64, na_value=np.nan)
        whole = np.isfinite(floats) & (np.mod(floats, 1) == 0)
        text = np.where(whole, np.char.mod("%d", np.where(whole, floats, 0).astype(np.int64)),
                        np.where(np.isnan(floats), "", floats.astype(str)))
        codes = pd.Series(text, index=codes.index)
    inverse, uniques = pd.factorize(codes, use_na_sentinel=True)
    uniques = np.array([*(str(u) for u in uniques), ""], dtype=object)
    validity = np.empty(len(uniques), np.int8)
    source = np.empty(len(uniques), np.int8)
    unknown = np.zeros(len(uniques), bool)
    for k, code in enumerate(uniques):
        q = classify(str(code), custom, numeric)
        if q is None:
            unknown[k], q = True, (Validity.BAD, Source.PROCESS)
        validity[k], source[k] = q
    return validity[inverse], source[inverse], unknown[inverse]


def parse_custom(table: Mapping[str, object]) -> tuple[dict[str, Quality], list[str]]:
    """``[snapshots.quality]`` (code → class name) as a lookup, and what was wrong with it."""
    out, problems = {}, []
    for code, name in table.items():
        q = CLASSES.get(str(name).strip().lower()) if isinstance(name, str) else None
        if q is None:
            problems.append(f"'{code}' maps to {name!r}, not one of {', '.join(CLASSES)}")
            continue
        out[str(code).strip()] = q
        out.setdefault(str(code).strip().lower(), q)
    return out, problems
