"""``calibra ledger SITE [ACTION ITEM …]``: the site's ledger from the command line.

With no action, the open findings are listed. ITEM is a finding id (``TAG|kind``), a tag (its
open findings) or a device (the open findings of all its points: one CT polarity fix corrects P
and Q at once). Times typed here are in the site's time zone unless they carry their own.
A network-model finding (tag ``ELEMENT:PARAMETER``) is settled by its owner with ``set-model``
(the value goes to model-corrections.csv) or ``keep-model`` (the model is right as it is).
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from calibra.cli.common import EXIT_OK, EXIT_UNUSABLE, UsageError, site_timezone
from calibra.diagnosis.findings import MODEL_KINDS
from calibra.io.model_corrections_file import MODEL_CORRECTIONS_FILE
from calibra.ledger import Ledger, LedgerError
from calibra.ledger.model_actions import keep_model, set_model, undo_last
from calibra.ledger.software_fixes import (
    ClockNotCorrectable,
    ModelNotCorrectable,
    apply_fixes,
    plan_fixes,
)
from calibra.ledger.states import OPEN_STATES, FindingState
from calibra.model.times import for_people, read_local

ACTIONS = ("confirm", "correct", "repaired", "dismiss", "note", "undo", "history",
           "set-model", "keep-model")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("site", type=Path, help="the site folder")
    parser.add_argument("--ledger", type=Path, default=None,
                        help="ledger file (default: calibra-ledger.sqlite in the site folder)")
    parser.add_argument("--user", default=None, help="name recorded with the action "
                                                     "(default: your login name)")
    sub = parser.add_subparsers(dest="action", metavar="ACTION")

    def action(name: str, help_text: str) -> argparse.ArgumentParser:
        p = sub.add_parser(name, help=help_text, description=help_text)
        p.add_argument("--user", default=argparse.SUPPRESS,
                       help="name recorded with the action (default: your login name)")
        return p

    p = action("confirm", "agree with the findings of ITEM")
    p.add_argument("item")
    p.add_argument("--note", default="")
    p = action("correct", "correct ITEM in software until the field fix "
                                       "(reversed, scale or offset findings)")
    p.add_argument("item")
    p.add_argument("--factor", type=float, default=None,
                   help="scale: measured = factor x true (default: the fitted factor)")
    p.add_argument("--offset", type=float, default=None,
                   help="offset: measured = true + offset, in the point's unit (default: fitted)")
    p.add_argument("--from", dest="valid_from", metavar="TIME", default=None,
                   help="correct from this time on (default: all data)")
    p.add_argument("--note", default="")
    p = action("repaired", "record the field repair of ITEM at a time")
    p.add_argument("item")
    p.add_argument("--at", required=True, metavar="TIME",
                   help="when the repair was done (site time zone unless given)")
    p.add_argument("--note", default="")
    p = action("dismiss", "dismiss the findings of ITEM, with a reason")
    p.add_argument("item")
    p.add_argument("--reason", required=True)
    p = action("set-model", "correct the network model for a model finding ITEM: its "
                            "parameter taken at the estimate (or --value) in every review")
    p.add_argument("item")
    p.add_argument("--value", type=float, default=None,
                   help="the value to use, in the network table's unit (default: the estimate)")
    p.add_argument("--note", default="", help="where the value comes from (datasheet, …)")
    p = action("keep-model", "the model's value of a model finding ITEM is right as it is: "
                             "the meters around it are the suspects")
    p.add_argument("item")
    p.add_argument("--reason", required=True, help="how the value was checked")
    p = action("note", "attach a note to ITEM")
    p.add_argument("item")
    p.add_argument("text")
    p = action("undo", "undo the last action on ITEM (default: the last action)")
    p.add_argument("item", nargs="?", default=None)
    p = action("history", "the actions on ITEM (default: all), oldest first")
    p.add_argument("item", nargs="?", default=None)


def resolve(findings: pd.DataFrame, item: str, open_only: bool = True) -> pd.DataFrame:
    """The findings ITEM names: a finding id, else a tag's, else a device's (open ones unless
    ``open_only`` is False). Raises UsageError naming what exists when nothing matches."""
    if item in findings.index:
        return findings.loc[[item]]
    pool = findings[findings["state"].isin(OPEN_STATES)] if open_only else findings
    for column in ("tag", "device"):
        hit = pool[pool[column].astype(str) == item]
        if len(hit):
            return hit
    if (findings["tag"].astype(str) == item).any() or (findings["device"].astype(str)
                                                          == item).any():
        states = sorted(set(findings.loc[(findings["tag"] == item) | (findings["device"] == item),
                                         "state"]))
        raise UsageError(f"{item}: no open finding (its findings are {', '.join(states)})")
    raise UsageError(f"{item}: not a finding id, tag or device of this ledger "
                     "(list them with 'calibra ledger SITE')")


def _list(ledger: Ledger, tz: str) -> None:
    found = ledger.findings()
    open_ = found[found["state"].isin(OPEN_STATES)]
    if open_.empty:
        print(f"no open findings ({len(found)} in the ledger)")
        return
    print(f"open findings: {len(open_)} of {len(found)}")
    for fid, r in open_.sort_values(["substation", "device", "tag"]).iterrows():
        flag = f" — {r['reopened']}" if r.get("reopened") else ""
        print(f"  {fid}  [{r['state']}]  {r['substation']} / {r['device']}{flag}")
        print(f"      {r['evidence']}")


def _correct(ledger: Ledger, rows: pd.DataFrame, args, tz: str) -> list[str]:
    valid_from = read_local(args.valid_from, tz, "--from") if args.valid_from else None
    try:
        plan = plan_fixes(rows, args.factor, args.offset)
    except ModelNotCorrectable as exc:
        raise UsageError(f"{exc.tag}: a network-model finding is corrected in the model, not "
                         f"in software: calibra ledger SITE set-model {exc.tag} (or keep-model "
                         "when the model is right)") from None
    except ClockNotCorrectable as exc:
        raise UsageError(f"{exc.tag}: an RTU clock is set right in the RTU, not in software; "
                         f"then mark it: calibra ledger SITE repaired {exc.tag} --at TIME "
                         "(the next review verifies it)") from None
    except LedgerError as exc:
        raise UsageError(str(exc).replace("factor; give one", "factor; give --factor")
                         .replace("offset; give one", "offset; give --offset")) from None
    apply_fixes(ledger, plan, args.user, valid_from, args.note)
    return [fix.describe() for fix in plan.fixes] + [f"left as is: {why}" for why in plan.left]


def _model_action(ledger: Ledger, rows: pd.DataFrame, args) -> None:
    """set-model / keep-model on the model findings of ``rows``."""
    model = rows[rows["finding"].isin(MODEL_KINDS)]
    if model.empty:
        kinds = ", ".join(sorted(set(rows["finding"])))
        raise UsageError(f"{args.item}: not a network-model finding ({kinds}); set-model and "
                         "keep-model act on model findings")
    for fid, r in model.iterrows():
        if args.action == "set-model":
            set_model(ledger, args.site, fid, args.value, args.user, args.note)
            value = args.value if args.value is not None else float(r["estimated_value"])
            print(f"{fid}: the model's {r['parameter']} of {r['element']} is taken at "
                  f"{value:.6g} (was {float(r['model_value']):.6g}) in every review; recorded "
                  f"in {MODEL_CORRECTIONS_FILE}. Update the network model at its source, then "
                  "mark it repaired")
        else:
            keep_model(ledger, args.site, fid, args.reason, args.user)
            print(f"{fid}: the model's value is kept as it is; recorded in "
                  f"{MODEL_CORRECTIONS_FILE}. The next review judges the meters around "
                  f"{r['element']} without this parameter as an explanation")


def _history(ledger: Ledger, item: str | None, tz: str) -> None:
    if item is None:
        table = ledger.history()
    else:
        found = ledger.findings()
        if item in found.index:
            table = ledger.history(finding_id=item)
        else:
            rows = resolve(found, item, open_only=False)
            parts = [ledger.history(tag=t) for t in sorted(set(rows["tag"]))]
            table = pd.concat(parts).sort_index() if parts else ledger.history()
    if table.empty:
        print("no actions")
        return
    for action_id, r in table.iterrows():
        undone = f" (undone by {int(r['undone_by'])})" if pd.notna(r["undone_by"]) else ""
        what = r["finding_id"] or f"{r['tag']} (all findings)"
        detail = {k: (for_people(v, tz) if k in ("at", "valid_from", "repaired_at") and v
                      else v)
                  for k, v in (r["payload"] or {}).items() if k not in ("values",)}
        print(f"{action_id:>5}  {for_people(r['at'], tz, seconds=True)}  {r['user']:<10} "
              f"{r['action']:<14} {what}{undone}  {detail if detail else ''}".rstrip())


def run(args: argparse.Namespace) -> int:
    tz = site_timezone(args.site)
    path = args.ledger or args.site / "calibra-ledger.sqlite"
    if not path.exists():
        raise UsageError(f"no ledger at {path}: run 'calibra review {args.site}' first")
    try:
        with Ledger(path) as ledger:
            return _run(ledger, args, tz)
    except LedgerError as exc:
        print(f"calibra ledger: {exc}")
        return EXIT_UNUSABLE
    except ValueError as exc:  # a time that is not one, a factor of zero…
        raise UsageError(str(exc)) from exc


def _run(ledger: Ledger, args: argparse.Namespace, tz: str) -> int:
    action = args.action
    if action is None:
        _list(ledger, tz)
        return EXIT_OK
    if action == "history":
        _history(ledger, args.item, tz)
        return EXIT_OK
    if action == "undo":
        if args.item is None:
            last = ledger.history()
            mine = last[~last["action"].isin(("found", "verify", "reopen", "undo"))
                        & last["undone_by"].isna()]
            if mine.empty:
                raise UsageError("nothing to undo")
            item = mine.iloc[-1]["finding_id"] or mine.iloc[-1]["tag"]
        else:
            item = args.item
        undo_last(ledger, args.site, item, args.user)
        print(f"undone: the last action on {item}")
        return EXIT_OK
    rows = resolve(ledger.findings(), args.item, open_only=action not in ("note", "dismiss"))
    if action == "confirm":
        for fid in rows.index[rows["state"] == FindingState.NEW]:
            ledger.confirm(fid, args.user, args.note)
            print(f"{fid}: confirmed")
        if not (rows["state"] == FindingState.NEW).any():
            states = ", ".join(sorted(set(rows["state"])))
            print(f"{args.item}: nothing to confirm (already {states})")
    elif action == "correct":
        for line in _correct(ledger, rows, args, tz):
            print(line)
    elif action == "repaired":
        at = read_local(args.at, tz, "--at")
        for tag in sorted(set(rows["tag"])):
            ledger.mark_repaired(tag, at, args.user, args.note)
            print(f"{tag}: repaired at {for_people(at, tz)}")
    elif action == "dismiss":
        for fid in rows.index:
            ledger.dismiss(fid, args.reason, args.user)
            print(f"{fid}: dismissed")
    elif action in ("set-model", "keep-model"):
        _model_action(ledger, rows, args)
    elif action == "note":
        for fid in rows.index:
            ledger.add_note(fid, args.text, args.user)
            print(f"{fid}: note added")
    return EXIT_OK
