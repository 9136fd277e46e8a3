"""The suspect-meter ledger of one site: reviews, findings, the action log and corrections.

:class:`Ledger` is the only code that reads or writes the ledger file. Every write is one
``BEGIN IMMEDIATE`` transaction: the action is appended to the log, and the cached finding
states and the corrections of the tag are rebuilt from the log in the same transaction, so
the cache can never disagree with the log, even after a crash.
"""

from __future__ import annotations

import getpass
import math
import sqlite3
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from pathlib import Path

import pandas as pd

import calibra
from calibra.diagnosis.findings import EXTRA_COLUMNS, FINDING_COLUMNS, Finding
from calibra.ledger import _json, _rows
from calibra.ledger._time import from_text, now_utc, to_text, to_utc
from calibra.ledger.corrections import Correction
from calibra.ledger.schema import LEDGER_FILE_NAME, LedgerError, open_file
from calibra.ledger.states import (
    CORRECTION_ACTIONS,
    FITTED_VALUES,
    NOT_IN_SOFTWARE,
    NOT_UNDOABLE,
    STATES,
    Action,
    FindingState,
    FindingStatus,
    changed_materially,
    next_state,
    replay_tag,
)
from calibra.model.times import TimeLike

#: The user name of the actions the review writes itself.
REVIEW_USER = "calibra"


def default_user() -> str:
    """The operating-system login name, or ``"unknown"``."""
    try:
        return getpass.getuser() or "unknown"
    except (OSError, KeyError, ImportError):
        return "unknown"


class Ledger:
    """One site's ledger file (default ``<site folder>/calibra-ledger.sqlite``).

    Use as a context manager. Action methods return the id of the action they appended;
    ``user`` defaults to :func:`default_user`.
    """

    def __init__(self, path: str | Path, *, clock: Callable[[], pd.Timestamp] | None = None,
                 migrations: Sequence[Sequence[str]] | None = None):
        self.path = Path(path)
        self._clock = clock or now_utc
        self._conn = open_file(self.path, migrations)
        self._conn.row_factory = sqlite3.Row

    @classmethod
    def for_site(cls, site_folder: str | Path, **kwargs) -> Ledger:
        """The ledger in its default place in a site folder."""
        return cls(Path(site_folder) / LEDGER_FILE_NAME, **kwargs)

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> Ledger:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ---- reviews ------------------------------------------------------------------------

    def record_review(self, findings: list[Finding], period_start: TimeLike,
                      period_end: TimeLike, settings: dict, summary: dict, *,
                      started_at: TimeLike | None = None,
                      judged_from: Mapping[str, TimeLike] | None = None,
                      not_judged: Iterable[str] = ()) -> int:
        """Store a finished review and its findings; returns the review id.

        ``judged_from``: tags whose data the review judged only from a later time than the
        period start (a repair inside the period: only the data after it); ``not_judged``:
        tags the review could not judge (too few data, not observable), never verified.

        New findings start as ``new``; known ones keep their state and get the new fitted
        values. Automatic actions (user ``calibra``) follow the review:

        - a ``repaired`` finding that this review does not find again (same tag and kind)
          becomes ``verified`` when the period ends after the repair time and the tag was
          judged;
        - a ``repaired`` finding found again in data that start at or after the repair time is
          reopened (``new``, flagged "the repair did not clear it");
        - a ``dismissed`` finding stays dismissed unless its factor, offset or drift per day
          moved by more than 20 % (see ``states.MATERIAL_CHANGE``) from the values it had
          when dismissed; then it is reopened. To keep it dismissed, dismiss it again.
        """
        start, end = to_utc(period_start, "period_start"), to_utc(period_end, "period_end")
        if end <= start:
            raise ValueError(f"review period ends ({end}) before it starts ({start})")
        rows = [_rows.stored_values(f) for f in findings]
        ids = [r["finding_id"] for r in rows]
        if len(set(ids)) != len(ids):
            twice = sorted({i for i in ids if ids.count(i) > 1})
            raise ValueError(f"a review lists these findings twice: {', '.join(twice)}")
        finished = self._clock()
        with self._transaction() as conn:
            review_id = conn.execute(
                "INSERT INTO reviews (started_at, finished_at, period_start, period_end, "
                "settings, summary, software_version) VALUES (?, ?, ?, ?, ?, ?, ?)",
                (to_text(started_at if started_at is not None else finished, "started_at"),
                 to_text(finished, "finished_at"), to_text(start, "period_start"),
                 to_text(end, "period_end"), _json.dumps(settings), _json.dumps(summary),
                 calibra.__version__)).lastrowid
            known = {r["finding_id"]: r["state"] for r in conn.execute(
                "SELECT finding_id, state FROM findings")}
            statuses = self._statuses(conn, (FindingState.REPAIRED, FindingState.DISMISSED))
            judged = {str(t): max(start, to_utc(v, "judged_from"))
                      for t, v in (judged_from or {}).items()}
            unjudged = {str(t) for t in not_judged}
            touched: set[str] = set()
            for row in rows:
                self._upsert_finding(conn, row, review_id, known)
                touched.add(row["tag"])
                status = statuses.get(row["finding_id"])
                if status is not None:
                    self._after_seen(conn, row, status, judged.get(row["tag"], start),
                                     review_id)
            seen = set(ids)
            for fid, status in statuses.items():
                repaired = status.state == FindingState.REPAIRED
                if fid in seen or not repaired or status.repaired_at >= end:
                    continue
                tag = conn.execute("SELECT tag FROM findings WHERE finding_id = ?",
                                   (fid,)).fetchone()["tag"]
                if tag in unjudged:
                    continue
                self._append(conn, "verify", tag, REVIEW_USER, fid, {"review": review_id})
                touched.add(tag)
            for tag in touched:
                self._refresh(conn, tag)
        return review_id

    def _upsert_finding(self, conn, row: dict, review_id: int, known: dict) -> None:
        values = (row["device"], row["substation"], row["factor"], row["offset"],
                  row["drift_per_day"], row["onset"], row["confidence"], row["evidence"],
                  row["extra"])
        if row["finding_id"] in known:
            conn.execute(
                'UPDATE findings SET device = ?, substation = ?, factor = ?, "offset" = ?, '
                "drift_per_day = ?, onset = ?, confidence = ?, evidence = ?, extra = ?, "
                "last_seen_review = ? WHERE finding_id = ?",
                (*values, review_id, row["finding_id"]))
            return
        conn.execute(
            'INSERT INTO findings (finding_id, tag, kind, device, substation, factor, "offset", '
            "drift_per_day, onset, confidence, evidence, extra, first_seen_review, "
            "last_seen_review, state) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (row["finding_id"], row["tag"], row["finding"], *values, review_id, review_id,
             FindingState.NEW))
        self._append(conn, "found", row["tag"], REVIEW_USER, row["finding_id"],
                     {"review": review_id})

    def _after_seen(self, conn, row: dict, status: FindingStatus, start: pd.Timestamp,
                    review_id: int) -> None:
        """Reopen a dismissed or repaired finding that this review finds again."""
        reason = None
        if status.state == FindingState.DISMISSED and changed_materially(
                status.dismissed_values or {}, row):
            reason = "fitted values changed materially since the dismissal"
        elif status.state == FindingState.REPAIRED and start >= status.repaired_at:
            reason = "the repair did not clear it: found again in the data after the repair"
        if reason:
            values = {k: row[k] for k in FITTED_VALUES}
            payload = {"review": review_id, "reason": reason, "values": values}
            if status.state == FindingState.REPAIRED:
                payload["repaired_at"] = to_text(status.repaired_at, "repaired_at")
            self._append(conn, "reopen", row["tag"], REVIEW_USER, row["finding_id"], payload)

    # ---- user actions -------------------------------------------------------------------

    def confirm(self, finding_id: str, user: str | None = None, note: str = "") -> int:
        """The engineer agrees with the finding (``new`` or ``dismissed`` → ``confirmed``)."""
        with self._transaction() as conn:
            tag = self._check_findingaction(conn, finding_id, "confirm")
            return self._act(conn, "confirm", tag, user, finding_id, _rows.with_note({}, note))

    def dismiss(self, finding_id: str, reason: str, user: str | None = None) -> int:
        """Dismiss a finding from any state, with a reason (kept with its fitted values)."""
        if not str(reason).strip():
            raise ValueError("dismissing a finding needs a reason")
        with self._transaction() as conn:
            tag = self._check_findingaction(conn, finding_id, "dismiss")
            row = conn.execute('SELECT factor, "offset", drift_per_day FROM findings '
                               "WHERE finding_id = ?", (finding_id,)).fetchone()
            payload = {"reason": str(reason).strip(), "values": dict(row)}
            return self._act(conn, "dismiss", tag, user, finding_id, payload)

    def mark_reversed(self, tag: str, user: str | None = None,
                      valid_from: TimeLike | None = None, note: str = "") -> int:
        """Correct a reversed point (gain −1) from ``valid_from`` (None: from the start)."""
        return self._correct("mark_reversed", tag, -1.0, 0.0, user, valid_from, note, {})

    def apply_scale(self, tag: str, factor: float, user: str | None = None,
                    valid_from: TimeLike | None = None, note: str = "") -> int:
        """Correct a scale error where measured = ``factor`` × true (gain 1/factor)."""
        factor = float(factor)
        if not math.isfinite(factor) or factor == 0.0:
            raise ValueError(f"scale factor for {tag!r} must be finite and non-zero: {factor}")
        return self._correct("apply_scale", tag, 1.0 / factor, 0.0, user, valid_from, note,
                             {"factor": factor})

    def apply_offset(self, tag: str, offset: float, user: str | None = None,
                     valid_from: TimeLike | None = None, note: str = "") -> int:
        """Correct an offset where measured = true + ``offset`` (bias −offset)."""
        offset = float(offset)
        if not math.isfinite(offset):
            raise ValueError(f"offset for {tag!r} must be finite: {offset}")
        return self._correct("apply_offset", tag, 1.0, -offset, user, valid_from, note,
                             {"offset": offset})

    def mark_repaired(self, tag: str, at: TimeLike, user: str | None = None,
                      note: str = "") -> int:
        """Record a field repair at ``at``: open corrections of the tag end there (raw values
        are used again after it) and its open findings become ``repaired``."""
        at_text = to_text(at, "repair time")
        if at_text is None:
            raise ValueError(f"marking {tag!r} repaired needs the repair time")
        with self._transaction() as conn:
            states = self._require_tag(conn, tag)
            has_open = conn.execute("SELECT 1 FROM corrections WHERE tag = ? AND valid_until "
                                    "IS NULL", (tag,)).fetchone()
            if not has_open and not any(next_state(s, "mark_repaired") for s in states):
                raise LedgerError(f"{tag}: nothing to mark repaired (findings: "
                                  f"{', '.join(sorted(set(states)))}; no open correction)")
            return self._act(conn, "mark_repaired", tag, user, None,
                             _rows.with_note({"at": at_text}, note))

    def add_note(self, finding_id_or_tag: str, text: str, user: str | None = None) -> int:
        """Attach a note to a finding or to every finding of a tag (no change of state)."""
        if not str(text).strip():
            raise ValueError("a note needs some text")
        with self._transaction() as conn:
            tag, finding_id = self._resolve(conn, finding_id_or_tag)
            return self._act(conn, "note", tag, user, finding_id, {"note": str(text)})

    def undo(self, finding_id_or_tag: str, user: str | None = None) -> int:
        """Undo the last action not yet undone on a finding (or tag); returns the undo's id.

        Tag-wide actions (corrections, repairs, tag notes) count as actions of each finding of
        the tag found before them. Undoing a correction removes it; undoing a repair reopens
        the corrections it ended. The first sighting of a finding and undo actions themselves
        cannot be undone.
        """
        with self._transaction() as conn:
            tag, finding_id = self._resolve(conn, finding_id_or_tag)
            actions = self._tag_actions(conn, tag, finding_id)
            undone = {a.undoes for a in actions if a.kind == "undo"}
            candidates = [a for a in actions if a.kind not in NOT_UNDOABLE and a.id not in undone]
            if not candidates:
                raise LedgerError(f"{finding_id_or_tag}: nothing to undo")
            last = max(candidates, key=lambda a: a.id)
            return self._act(conn, "undo", tag, user, last.finding_id, {"kind": last.kind},
                             undoes=last.id)

    # ---- reading ------------------------------------------------------------------------

    def findings(self, state: str | None = None) -> pd.DataFrame:
        """Findings indexed by ``finding_id``: the findings.csv columns with the latest fitted
        values, plus ``state``, ``first_seen_review`` and ``last_seen_review``."""
        if state is not None and state not in STATES:
            raise ValueError(f"unknown state {state!r}; states are {', '.join(STATES)}")
        sql = "SELECT * FROM findings" + (" WHERE state = ?" if state else "")
        records = []
        replays: dict[str, dict[str, FindingStatus]] = {}  # per tag: reopen reason, repair time
        for r in self._conn.execute(sql + " ORDER BY finding_id", (state,) if state else ()):
            record = {**_json.loads(r["extra"]), **dict(r)}
            record["finding"] = record.pop("kind")
            record.pop("extra")
            record["onset"] = from_text(record["onset"])
            record["until"] = from_text(record.get("until"))
            if record["tag"] not in replays:
                replays[record["tag"]] = replay_tag(self._tag_actions(self._conn,
                                                                      record["tag"]))[0]
            status = replays[record["tag"]].get(record["finding_id"])
            record["reopened"] = status.reopened if status is not None else ""
            record["repaired_at"] = status.repaired_at if status is not None else None
            records.append(record)
        columns = [*FINDING_COLUMNS, *EXTRA_COLUMNS, "state", "first_seen_review",
                   "last_seen_review", "reopened", "repaired_at"]
        frame = pd.DataFrame(records, columns=list(dict.fromkeys(
            columns + [k for r in records for k in r])))
        for name in ("factor", "offset", "drift_per_day", "confidence", "share_supporting"):
            frame[name] = pd.to_numeric(frame[name]).astype(float)
        for name in ("onset", "until", "repaired_at"):
            frame[name] = pd.to_datetime(frame[name], utc=True)
        return frame.set_index("finding_id")

    def history(self, tag: str | None = None, finding_id: str | None = None) -> pd.DataFrame:
        """The action log (oldest first), indexed by action id; ``undone_by`` names the undo.
        For a finding: its own actions and the tag-wide actions of its tag since it was found."""
        if finding_id is not None:
            row = self._conn.execute("SELECT tag FROM findings WHERE finding_id = ?",
                                     (finding_id,)).fetchone()
            if row is None:
                raise LedgerError(f"no finding {finding_id!r} in {self.path}")
            actions = self._tag_actions(self._conn, row["tag"], finding_id)
        elif tag is not None:
            actions = self._tag_actions(self._conn, tag)
        else:
            actions = [_rows.action(r) for r in self._conn.execute("SELECT * FROM actions "
                                                              "ORDER BY id")]
        undone_by = {a.undoes: a.id for a in actions if a.kind == "undo"}
        frame = pd.DataFrame(
            [{"action_id": a.id, "at": from_text(a.at), "user": a.user, "tag": a.tag,
              "finding_id": a.finding_id, "action": a.kind, "payload": a.payload,
              "undoes": a.undoes, "undone_by": undone_by.get(a.id)} for a in actions],
            columns=["action_id", "at", "user", "tag", "finding_id", "action", "payload",
                     "undoes", "undone_by"])
        return frame.set_index("action_id")

    def reviews(self) -> pd.DataFrame:
        """Reviews indexed by id, with settings and summary as dicts."""
        records = []
        for r in self._conn.execute("SELECT * FROM reviews ORDER BY id"):
            record = dict(r)
            for name in ("started_at", "finished_at", "period_start", "period_end"):
                record[name] = from_text(record[name])
            record["settings"] = _json.loads(record["settings"])
            record["summary"] = _json.loads(record["summary"])
            records.append(record)
        columns = ["id", "started_at", "finished_at", "period_start", "period_end", "settings",
                   "summary", "software_version"]
        return pd.DataFrame(records, columns=columns).set_index("id")

    def active_corrections(
        self, at_or_period: TimeLike | tuple[TimeLike, TimeLike] | None = None,
    ) -> list[Correction]:
        """Corrections in the order recorded: None → those still in force (open-ended); a time
        → those covering it; a (start, end) pair → those overlapping [start, end)."""
        rows = self._conn.execute("SELECT * FROM corrections ORDER BY source_action")
        corrections = [_rows.correction(r) for r in rows]
        if at_or_period is None:
            return [c for c in corrections if c.is_open()]
        if isinstance(at_or_period, tuple):
            start, end = (to_utc(t, "correction period") for t in at_or_period)
            return [c for c in corrections if c.overlaps(start, end)]
        at = to_utc(at_or_period, "correction time")
        return [c for c in corrections if c.covers(at)]

    def replayed(self) -> tuple[dict[str, str], list[Correction]]:
        """Finding states and corrections recomputed from the action log alone."""
        by_tag: dict[str, list[Action]] = {}
        for r in self._conn.execute("SELECT * FROM actions ORDER BY id"):
            a = _rows.action(r)
            by_tag.setdefault(a.tag, []).append(a)
        states: dict[str, str] = {}
        corrections: list[Correction] = []
        for actions in by_tag.values():
            statuses, tag_corrections = replay_tag(actions)
            states.update({fid: s.state for fid, s in statuses.items()})
            corrections.extend(tag_corrections)
        return states, sorted(corrections, key=lambda c: c.source_action)

    def cache_disagreements(self) -> list[str]:
        """Where the cached states or corrections differ from a replay of the log (expect [])."""
        states, corrections = self.replayed()
        cached = {r["finding_id"]: r["state"] for r in self._conn.execute(
            "SELECT finding_id, state FROM findings")}
        problems = [f"{fid}: cached {cached.get(fid)}, replayed {states.get(fid)}"
                    for fid in sorted(set(states) | set(cached))
                    if states.get(fid) != cached.get(fid)]
        stored = [_rows.correction(r) for r in self._conn.execute(
            "SELECT * FROM corrections ORDER BY source_action")]
        if stored != corrections:
            problems.append(f"corrections: cached {stored}, replayed {corrections}")
        return problems

    def rebuild_cache(self) -> None:
        """Rewrite every cached state and correction from the action log."""
        with self._transaction() as conn:
            for (tag,) in conn.execute("SELECT DISTINCT tag FROM actions").fetchall():
                self._refresh(conn, tag)

    def integrity_check(self) -> str:
        """SQLite's own check of the file (``"ok"`` when sound)."""
        rows = self._conn.execute("PRAGMA integrity_check").fetchall()
        return "\n".join(str(r[0]) for r in rows)

    # ---- internals ----------------------------------------------------------------------

    @contextmanager
    def _transaction(self) -> Iterator[sqlite3.Connection]:
        conn = self._conn
        conn.execute("BEGIN IMMEDIATE")
        try:
            yield conn
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        conn.execute("COMMIT")

    def _append(self, conn, kind: str, tag: str, user: str | None, finding_id: str | None,
                payload: dict, undoes: int | None = None) -> int:
        user = default_user() if user is None else str(user)
        return conn.execute(
            "INSERT INTO actions (at, user, tag, finding_id, kind, payload, undoes) "
            "VALUES (?, ?, ?, ?, ?, ?, ?)",
            (to_text(self._clock(), "action time"), user, tag, finding_id, kind,
             _json.dumps(payload), undoes)).lastrowid

    def _act(self, conn, kind: str, tag: str, user: str | None, finding_id: str | None,
             payload: dict, undoes: int | None = None) -> int:
        """Append a user action and rebuild the tag's cached state in the same transaction."""
        action_id = self._append(conn, kind, tag, user, finding_id, payload, undoes)
        self._refresh(conn, tag)
        return action_id

    def _correct(self, kind: str, tag: str, gain: float, bias: float, user: str | None,
                 valid_from: TimeLike | None, note: str, extra: dict) -> int:
        start = to_text(valid_from, "valid_from")
        correction_kind = CORRECTION_ACTIONS[kind]
        with self._transaction() as conn:
            self._require_tag(conn, tag, correction=True)
            clash = conn.execute("SELECT source_action FROM corrections WHERE tag = ? AND "
                                 "kind = ? AND valid_until IS NULL",
                                 (tag, correction_kind)).fetchone()
            if clash:
                raise LedgerError(
                    f"{tag}: a {correction_kind} correction is already in force (action "
                    f"{clash[0]}); undo it or mark the repair first")
            payload = {"gain": gain, "bias": bias, "valid_from": start, **extra}
            return self._act(conn, kind, tag, user, None, _rows.with_note(payload, note))

    def _refresh(self, conn, tag: str) -> None:
        statuses, corrections = replay_tag(self._tag_actions(conn, tag))
        for fid, status in statuses.items():
            conn.execute("UPDATE findings SET state = ? WHERE finding_id = ? AND state != ?",
                         (status.state, fid, status.state))
        conn.execute("DELETE FROM corrections WHERE tag = ?", (tag,))
        conn.executemany(
            "INSERT INTO corrections (tag, kind, gain, bias, valid_from, valid_until, "
            "source_action) VALUES (?, ?, ?, ?, ?, ?, ?)",
            [(c.tag, c.kind, c.gain, c.bias, to_text(c.valid_from, "valid_from"),
              to_text(c.valid_until, "valid_until"), c.source_action) for c in corrections])

    def _tag_actions(self, conn, tag: str, finding_id: str | None = None) -> list[Action]:
        """A tag's actions; with ``finding_id``, those concerning that finding: its own and
        the tag-wide ones since it was found (undo actions name the finding they act on)."""
        actions = [_rows.action(r) for r in conn.execute("SELECT * FROM actions WHERE tag = ? "
                                                    "ORDER BY id", (tag,))]
        if finding_id is None:
            return actions
        first = min(a.id for a in actions if a.finding_id == finding_id)
        return [a for a in actions
                if a.finding_id == finding_id or (a.finding_id is None and a.id > first)]

    def _statuses(self, conn, state_in: tuple[str, ...]) -> dict[str, FindingStatus]:
        """Replayed status of the findings whose cached state is one of ``state_in``."""
        marks = ", ".join("?" * len(state_in))
        rows = conn.execute(f"SELECT finding_id, tag FROM findings WHERE state IN ({marks})",
                            state_in).fetchall()
        out: dict[str, FindingStatus] = {}
        for tag in {r["tag"] for r in rows}:
            out.update(replay_tag(self._tag_actions(conn, tag))[0])
        return {r["finding_id"]: out[r["finding_id"]] for r in rows}

    def _check_findingaction(self, conn, finding_id: str, kind: str) -> str:
        row = conn.execute("SELECT tag, state FROM findings WHERE finding_id = ?",
                           (finding_id,)).fetchone()
        if row is None:
            raise LedgerError(f"no finding {finding_id!r} in {self.path}")
        if next_state(row["state"], kind) is None:
            raise LedgerError(f"cannot {kind} {finding_id}: it is {row['state']}")
        return row["tag"]

    def _require_tag(self, conn, tag: str, correction: bool = False) -> list[str]:
        """The tag's finding states; refuses an unknown tag and a correction set right elsewhere."""
        rows = conn.execute("SELECT state, kind FROM findings WHERE tag = ?", (tag,)).fetchall()
        if not rows:
            raise LedgerError(f"tag {tag!r} has no finding in {self.path}")
        if correction and all(r["kind"] in NOT_IN_SOFTWARE for r in rows):
            raise LedgerError(f"{tag}: {NOT_IN_SOFTWARE[rows[0]['kind']]}, not in software")
        return [r["state"] for r in rows]

    def _resolve(self, conn, finding_id_or_tag: str) -> tuple[str, str | None]:
        row = conn.execute("SELECT tag FROM findings WHERE finding_id = ?",
                           (finding_id_or_tag,)).fetchone()
        if row is not None:
            return row["tag"], finding_id_or_tag
        self._require_tag(conn, finding_id_or_tag)
        return finding_id_or_tag, None
