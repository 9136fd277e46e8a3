"""What the engineer does about the selected point, each action written to the ledger at once.

Every action has a keyboard shortcut. Corrections (reversed, scale, offset) and repairs act on
the whole point; confirm, dismiss and notes on the selected finding. Undo takes back the last
action on the selected finding (or, without one, on the point).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING

import pandas as pd
from PySide6.QtGui import QAction, QKeySequence

from calibra.diagnosis.findings import MODEL_KINDS
from calibra.ledger import LedgerError
from calibra.ledger.model_actions import keep_model, set_model, undo_last
from calibra.model.times import for_people

if TYPE_CHECKING:
    from calibra.gui.qt_main import MainWindow

#: (name, menu text, shortcut, status tip)
ACTIONS = [
    ("next", "Next finding", "F8", "Select the next finding in the list"),
    ("previous", "Previous finding", "Shift+F8", "Select the previous finding in the list"),
    ("confirm", "Confirm finding", "Ctrl+Shift+C", "Agree with the finding"),
    ("reversed", "Mark reversed", "Ctrl+Shift+R",
     "Correct the point in software: it reads the negated value"),
    ("scale", "Apply scale factor…", "Ctrl+Shift+K",
     "Correct the point in software: it reads factor × the true value"),
    ("offset", "Apply offset…", "Ctrl+Shift+B",
     "Correct the point in software: it reads the true value plus an offset"),
    ("repaired", "Mark repaired…", "Ctrl+Shift+M",
     "Record the field repair time: raw values are used again after it"),
    ("dismiss", "Dismiss…", "Ctrl+Shift+D", "Dismiss the finding, with a reason"),
    ("note", "Add note…", "Ctrl+Shift+N", "Attach a note to the finding"),
    ("set_model", "Correct the model…", "Ctrl+Shift+E",
     "Network-model finding: take the parameter at the estimate (or a value you give) in "
     "every later review, recorded in model-corrections.csv"),
    ("keep_model", "Model value is right…", "Ctrl+Shift+J",
     "Network-model finding: the model's value was checked and is right; the meters around "
     "it are the suspects"),
    ("undo", "Undo last action", QKeySequence.Undo, "Take back the last action on the finding"),
]


class PointActions:
    """The point actions of the main window and their handlers."""

    def __init__(self, window: MainWindow):
        self.w = window
        self.state = window.state
        self.actions: dict[str, QAction] = {}
        handlers: dict[str, Callable[[], object]] = {
            "next": lambda: self.w.findings.step(1),
            "previous": lambda: self.w.findings.step(-1),
            "confirm": self.confirm, "reversed": self.mark_reversed, "scale": self.apply_scale,
            "offset": self.apply_offset, "repaired": self.mark_repaired,
            "dismiss": self.dismiss, "note": self.add_note, "undo": self.undo,
            "set_model": self.set_model, "keep_model": self.keep_model,
        }
        for name, text, key, tip in ACTIONS:
            action = QAction(text, window)
            action.setShortcut(QKeySequence(key))
            action.setStatusTip(tip)
            action.setToolTip(f"{tip} ({action.shortcut().toString()})")
            action.triggered.connect(lambda _=False, h=handlers[name]: h())
            self.actions[name] = action

    # ---- helpers ------------------------------------------------------------------------
    def _do(self, what: str, call: Callable[[], object]) -> bool:
        """Run one ledger call; report refusals; on success the state reads the ledger again
        (and its views redraw)."""
        tag = self.state.tag
        if self.state.ledger is None or tag is None:
            self.w.say("Select a point first.")
            return False
        try:
            call()
        except (LedgerError, ValueError) as exc:
            self.w.say(f"{what}: {exc}", warn=True)
            return False
        self.state.ledger_written()
        self.w.report_written(f"{tag}: {what}")
        return True

    # ---- actions ------------------------------------------------------------------------
    def confirm(self) -> bool:
        fid = self.state.finding_id
        if fid is None:
            self.w.say("Select a finding to confirm.")
            return False
        return self._do("confirmed", lambda: self.state.ledger.confirm(fid))

    def mark_reversed(self) -> bool:
        tag = self.state.tag
        return self._do("marked reversed", lambda: self.state.ledger.mark_reversed(tag))

    def _ask_fitted(self, column: str, default: float, title: str, prompt: str) -> float | None:
        """Ask for a number, offering the finding's fitted ``column`` (else ``default``)."""
        row = self.state.finding_row()
        fitted = row.get(column) if row is not None else None
        start = float(fitted) if fitted is not None and pd.notna(fitted) else default
        return self.w.prompts.number(title, prompt, start)

    def apply_scale(self, factor: float | None = None) -> bool:
        tag = self.state.tag
        if factor is None and tag is not None:
            factor = self._ask_fitted("factor", 1.0, "Apply scale factor",
                                      f"{tag} reads factor × the true value; factor:")
            if factor is None:
                return False
        return self._do(f"scale factor {factor:g} applied",
                        lambda: self.state.ledger.apply_scale(tag, factor))

    def apply_offset(self, offset: float | None = None) -> bool:
        tag = self.state.tag
        if offset is None and tag is not None:
            unit = self._unit(tag)
            offset = self._ask_fitted("offset", 0.0, "Apply offset",
                                      f"{tag} reads the true value plus an offset; offset "
                                      f"in {unit}:" if unit else
                                      f"{tag} reads the true value plus an offset; offset:")
            if offset is None:
                return False
        return self._do(f"offset {offset:+g} applied",
                        lambda: self.state.ledger.apply_offset(tag, offset))

    def mark_repaired(self, at: pd.Timestamp | None = None) -> bool:
        tag = self.state.tag
        if at is None and tag is not None and self.state.site is not None:
            # Default: the end of the reviewed data (a repair is usually entered afterwards
            # for a time the data reach), else the last snapshot, else now.
            run, site = self.state.run, self.state.site
            default = (run.result.period_end if run is not None else
                       site.snapshots.index[-1] if len(site.snapshots) else
                       pd.Timestamp.now(tz="UTC"))
            at = self.w.prompts.when("Mark repaired", f"When was {tag} repaired?",
                                     default, site.timezone)
            if at is None:
                return False
        zone = self.state.site.timezone if self.state.site is not None else "UTC"
        return self._do(f"marked repaired at {for_people(at, zone)}",
                        lambda: self.state.ledger.mark_repaired(tag, at))

    def _unit(self, tag: str | None) -> str:
        site = self.state.site
        if site is None or tag is None or tag not in site.points.index:
            return ""
        return str(site.points.at[tag, "unit"] or "")

    def dismiss(self, reason: str | None = None) -> bool:
        fid = self.state.finding_id
        if fid is None:
            self.w.say("Select a finding to dismiss.")
            return False
        if reason is None:
            tag, _, kind = str(fid).partition("|")
            reason = self.w.prompts.text("Dismiss finding",
                                         f"Why is the {kind or 'finding'} finding on {tag} "
                                         "dismissed?")
            if reason is None:
                return False
        return self._do("dismissed", lambda: self.state.ledger.dismiss(fid, reason))

    def add_note(self, text: str | None = None) -> bool:
        target = self.state.finding_id or self.state.tag
        if target is None:
            self.w.say("Select a point first.")
            return False
        if text is None:
            text = self.w.prompts.text("Add note", f"Note on {target}:")
            if text is None:
                return False
        return self._do("note added", lambda: self.state.ledger.add_note(target, text))

    def undo(self) -> bool:
        target = self.state.finding_id or self.state.tag
        if target is None:
            self.w.say("Select a point first.")
            return False
        folder = self.state.site.path if self.state.site is not None else None
        if folder is None:
            return self._do("last action undone", lambda: self.state.ledger.undo(target))
        return self._do("last action undone",
                        lambda: undo_last(self.state.ledger, folder, target))

    def _model_finding(self, what: str) -> tuple[str, pd.Series] | None:
        fid, row = self.state.finding_id, self.state.finding_row()
        if fid is None or row is None or str(row.get("finding")) not in MODEL_KINDS:
            self.w.say(f"{what}: select a network-model finding first (the point actions act "
                       "on meters).", warn=True)
            return None
        if self.state.site is None or self.state.site.path is None:
            self.w.say(f"{what}: the site has no folder to record it in.", warn=True)
            return None
        return fid, row

    def set_model(self, value: float | None = None) -> bool:
        """Correct the network model: the finding's parameter at ``value`` (asked, offering
        the estimate) from the next review on."""
        found = self._model_finding("Correct the model")
        if found is None:
            return False
        fid, row = found
        if value is None:
            value = self._ask_fitted("estimated_value", float(row["model_value"]),
                                     "Correct the model",
                                     f"{row['parameter']} of {row['element']} (the model holds "
                                     f"{float(row['model_value']):.6g}); value to use:")
            if value is None:
                return False
        folder = self.state.site.path
        return self._do(f"the model's {row['parameter']} of {row['element']} set to "
                        f"{value:.6g} (model-corrections.csv)",
                        lambda: set_model(self.state.ledger, folder, fid, value))

    def keep_model(self, reason: str | None = None) -> bool:
        """The model's value is right as it is (``reason``: how it was checked)."""
        found = self._model_finding("Model value is right")
        if found is None:
            return False
        fid, row = found
        if reason is None:
            reason = self.w.prompts.text("Model value is right",
                                         f"How was the {row['parameter']} of {row['element']} "
                                         "checked (datasheet, nameplate, tap position)?")
            if reason is None:
                return False
        folder = self.state.site.path
        return self._do("the model's value kept as it is (model-corrections.csv)",
                        lambda: keep_model(self.state.ledger, folder, fid, reason))
