"""Suspect-meter ledger: what each review found and what the engineers did about it.

One SQLite file per site, owned by :class:`Ledger`; corrections are applied to snapshots by
the pure function :func:`apply_corrections`.
"""

from calibra.ledger.corrections import CORRECTION_KINDS, Correction, apply_corrections
from calibra.ledger.ledger import REVIEW_USER, Ledger, default_user
from calibra.ledger.schema import LEDGER_FILE_NAME, LedgerError
from calibra.ledger.states import STATES

__all__ = [
    "CORRECTION_KINDS", "LEDGER_FILE_NAME", "REVIEW_USER", "STATES", "Correction", "Ledger",
    "LedgerError", "apply_corrections", "default_user",
]
