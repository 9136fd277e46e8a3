"""Device-level actions: one decision for every open finding of the selected point's device,
as ``calibra ledger SITE correct DEVICE`` does (one CT polarity fix corrects P and Q)."""

from __future__ import annotations

from typing import TYPE_CHECKING

import pandas as pd
from PySide6.QtGui import QAction, QKeySequence

from calibra.diagnosis.findings import CORRECTABLE_KINDS
from calibra.ledger import LedgerError
from calibra.ledger.software_fixes import apply_fixes, plan_fixes
from calibra.ledger.states import AWAITING_ACTION_STATES, FindingState

if TYPE_CHECKING:
    from calibra.gui.qt_main import MainWindow


class DeviceActions:
    """``correct`` and ``confirm`` for all open findings of the current point's device."""

    def __init__(self, window: MainWindow):
        self.w = window
        self.state = window.state
        self.correct_action = QAction("Correct whole device (fitted values)", window)
        self.correct_action.setShortcut(QKeySequence("Ctrl+Alt+R"))
        self.correct_action.setStatusTip("Correct every open reversed, scale or offset finding "
                                         "of the selected point's device with its fitted value")
        self.correct_action.triggered.connect(lambda _=False: self.correct_device())
        self.confirm_action = QAction("Confirm whole device", window)
        self.confirm_action.setStatusTip("Confirm every new finding of the selected point's "
                                         "device")
        self.confirm_action.triggered.connect(lambda _=False: self.confirm_device())

    def device_findings(self) -> pd.DataFrame:
        """The undecided findings of the current point's device in the latest review."""
        state = self.state
        if state.site is None or state.tag is None or state.tag not in state.site.points.index:
            return pd.DataFrame()
        device = str(state.site.points.at[state.tag, "device"])
        table = state.view.table()
        if table.empty:
            return table
        return table[(table["device"] == device) & table["state"].isin(AWAITING_ACTION_STATES)
                     & table["in_review"]]

    def correct_device(self) -> list[str]:
        """Correct each point of the device once, by its first correctable finding and its
        fitted value (:mod:`calibra.ledger.software_fixes`, the command line's rule); nothing
        is written when one of them cannot be corrected."""
        rows = self.device_findings()
        if rows.empty or not rows["finding"].isin(CORRECTABLE_KINDS).any():
            self.w.say("The selected point's device has no open finding that a software "
                       "correction can undo.")
            return []
        try:
            plan = plan_fixes(rows)
            apply_fixes(self.state.ledger, plan)
        except (LedgerError, ValueError) as exc:
            self.w.say(f"Device not corrected: {exc}", warn=True)
            return []
        done = [fix.describe() for fix in plan.fixes]
        self.state.ledger_written()
        self.w.report_written("; ".join(done + [f"left as is: {why}" for why in plan.left]))
        return done

    def confirm_device(self) -> list[str]:
        """Confirm each new finding of the device."""
        rows = self.device_findings()
        rows = rows[rows["state"] == FindingState.NEW] if len(rows) else rows
        if rows.empty:
            self.w.say("The selected point's device has no new finding to confirm.")
            return []
        done = []
        try:
            for fid in rows["finding_id"]:
                self.state.ledger.confirm(fid)
                done.append(str(fid))
        except (LedgerError, ValueError) as exc:
            self.w.say(f"Device confirmation stopped: {exc}", warn=True)
        if done:
            self.state.ledger_written()
            self.w.report_written("confirmed: " + ", ".join(done))
        return done
