"""Writing small site folders for the loader tests: a valid invented site, then mutations.

The site (four invented substations) is the same as the example in ``sample_site/README.md``.
Rows are addressed as a spreadsheet shows them: the header is row 1.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from pathlib import Path

from calibra.io import load_site
from calibra.model.site import LoadProblem, SiteLoadError

SITE_TOML = """\
[site]
name = "Fenwick Hollow district"
base_mva = 100.0
frequency_hz = 50.0
timezone = "Europe/Berlin"
reference_bus = "FNH132"
"""

BUSES = """\
bus,substation,kv,zero_injection,g_shunt_mw,b_shunt_mvar,name
FNH132,Fenwick Hollow,132,false,0,0,Fenwick Hollow 132 kV
TLR132,Tallis Reach,132,false,0,0,Tallis Reach 132 kV
TLR33,Tallis Reach,33,false,0,4.5,Tallis Reach 33 kV
ORB132,Orrin Bay,132,true,0,0,Orrin Bay switching station
PLM33,Pellham Mill,33,false,0,0,Pellham Mill 33 kV
"""

BRANCHES = """\
branch,from_bus,to_bus,r,x,b,tap,shift_deg,kind,in_service,name
FNH-TLR-1,FNH132,TLR132,0.012,0.061,0.021,1,0,line,true,Fenwick–Tallis circuit 1
FNH-ORB-1,FNH132,ORB132,0.009,0.044,0.015,1,0,line,true,Fenwick–Orrin
ORB-TLR-1,ORB132,TLR132,0.010,0.052,0.018,1,0,line,true,Orrin–Tallis
TLR-T1,TLR132,TLR33,0.004,0.125,0,0.985,0,transformer,true,Tallis Reach T1
TLR-PLM-1,TLR33,PLM33,0.031,0.082,0.002,1,0,line,true,Tallis–Pellham
"""

POINTS = """\
tag,quantity,element,end,unit,full_scale,accuracy_pct,substation,device,rtu,channel,ct_ratio,vt_ratio,sigma,note
FNH.TLR1.P,p_flow,FNH-TLR-1,from,MW,200,0.5,Fenwick Hollow,FNH-TD1,FNH-RTU,AI01,800:1,132000:110,,
FNH.TLR1.Q,q_flow,FNH-TLR-1,from,Mvar,200,0.5,Fenwick Hollow,FNH-TD1,FNH-RTU,AI02,800:1,132000:110,,
TLR.FNH1.P,p_flow,FNH-TLR-1,to,MW,200,0.5,Tallis Reach,TLR-TD1,TLR-RTU,AI01,800:1,132000:110,,
TLR.T1.I,i_magnitude,TLR-T1,from,A,600,0.5,Tallis Reach,TLR-TD5,TLR-RTU,AI05,600:1,,,
FNH.V,v_magnitude,FNH132,,kV,150,0.5,Fenwick Hollow,FNH-TD9,FNH-RTU,AI10,,132000:110,0.3,
PLM.LOAD.P,p_injection,PLM33,,MW,50,1.0,Pellham Mill,PLM-TD1,PLM-RTU,AI01,400:5,,,feeder total
TLR.PLM1.CB,branch_status,TLR-PLM-1,,status,,,Tallis Reach,TLR-CB3,TLR-RTU,DI03,,,,
"""

SNAPSHOTS = """\
timestamp,FNH.TLR1.P,FNH.TLR1.Q,TLR.FNH1.P,TLR.T1.I,FNH.V,PLM.LOAD.P,TLR.PLM1.CB
2024-03-04 10:00:00,61.2,12.4,-60.8,301.5,133.1,-18.2,1
2024-03-04 10:01:00,60.7,12.1,-60.3,299.8,133.0,-18.0,1
2024-03-04 10:02:00,60.9,12.6,-60.5,300.6,133.2,-18.4,1
2024-03-04 10:03:00,61.5,12.2,-61.1,302.2,133.1,-18.3,0
"""


class Table:
    """A CSV table held as header + rows of text, edited by spreadsheet row number."""

    def __init__(self, text: str) -> None:
        records = list(csv.reader(io.StringIO(text, newline="")))
        self.header = records[0]
        self.rows = [r + [""] * (len(self.header) - len(r)) for r in records[1:]]

    def set(self, row: int, column: str, value: str) -> Table:
        self.rows[row - 2][self.header.index(column)] = value
        return self

    def get(self, row: int, column: str) -> str:
        return self.rows[row - 2][self.header.index(column)]

    def drop_column(self, column: str) -> Table:
        k = self.header.index(column)
        self.header.pop(k)
        for r in self.rows:
            r.pop(k)
        return self

    def add_column(self, column: str, value: str = "") -> Table:
        self.header.append(column)
        for r in self.rows:
            r.append(value)
        return self

    def add_row(self, values: list[str]) -> Table:
        self.rows.append(list(values))
        return self

    def text(self, sep: str = ",") -> str:
        """CSV text with LF line ends. A cell holding a CR alone is quoted (all cells are, then:
        the csv module quotes only for the line terminator's characters), as RFC 4180 asks;
        unquoted, the CR would end the record."""
        records = [self.header, *self.rows]
        carriage_return = any("\r" in cell for record in records for cell in record)
        out = io.StringIO()
        csv.writer(out, delimiter=sep, lineterminator="\n",
                   quoting=csv.QUOTE_ALL if carriage_return else csv.QUOTE_MINIMAL,
                   ).writerows(records)
        return out.getvalue()


@dataclass
class SiteFiles:
    """The text of every file of a site folder; ``write`` puts them in a folder."""

    toml: str = SITE_TOML
    buses: Table = field(default_factory=lambda: Table(BUSES))
    branches: Table = field(default_factory=lambda: Table(BRANCHES))
    points: Table = field(default_factory=lambda: Table(POINTS))
    snapshots: dict[str, Table | str | bytes] = field(
        default_factory=lambda: {"week.csv": Table(SNAPSHOTS)}
    )
    extra: dict[str, str | bytes] = field(default_factory=dict)

    def write(self, root: Path) -> Path:
        (root / "network").mkdir(parents=True, exist_ok=True)
        (root / "snapshots").mkdir(exist_ok=True)
        files: dict[str, str | bytes | Table | None] = {
            "site.toml": self.toml,
            "network/buses.csv": self.buses,
            "network/branches.csv": self.branches,
            "points.csv": self.points,
        }
        files.update({f"snapshots/{k}": v for k, v in self.snapshots.items()})
        files.update(self.extra)
        for rel, content in files.items():
            if content is None:
                continue
            path = root / rel
            path.parent.mkdir(parents=True, exist_ok=True)
            if isinstance(content, Table):
                content = content.text()
            if isinstance(content, bytes):
                path.write_bytes(content)
            else:
                path.write_text(content, encoding="utf-8")
        return root


TABLE_FILES = {
    "buses": "network/buses.csv",
    "branches": "network/branches.csv",
    "points": "points.csv",
}


def problem_for_cell(
    files: SiteFiles, root: Path, table: str, row: int, column: str, value: str,
    severity: str = "error",
) -> LoadProblem:
    """Put ``value`` in one cell of a valid site and return the problem reported there."""
    getattr(files, table).set(row, column, value)
    return find(problems_of(files.write(root)), TABLE_FILES[table], row, column, severity)


def problems_of(root: Path, **kwargs) -> list[LoadProblem]:
    """Every problem the loader reports for a folder, whether or not it is usable."""
    try:
        return load_site(root, **kwargs).problems
    except SiteLoadError as exc:
        return exc.problems


def find(
    problems: list[LoadProblem], file: str, row: int | None, column: str | None,
    severity: str = "error",
) -> LoadProblem:
    """The one problem at that place and severity (the test fails with the list if none)."""
    hits = [
        p for p in problems
        if p.file == file and p.row == row and p.column == column and p.severity == severity
    ]
    assert hits, "no such problem; found:\n" + "\n".join(str(p) for p in problems)
    return hits[0]


# ----------------------------------------------------------------------------- real models
#: Rows that give the invented site what real network models have (values typical of such
#: models, no source): a 220 kV bus with a 150 Mvar shunt reactor, a three-winding transformer
#: as a star of three branches around a zero-injection star point (one star branch with a
#: negative reactance, as star equivalents can have), a 21 kV generator terminal, a 0.4 kV
#: station-service bus, a second 132 kV bar behind a bus coupler of x = 1e-5 pu, a series
#: capacitor in front of a second Fenwick–Orrin circuit, a parallel Fenwick–Tallis circuit, a
#: phase-shifting transformer and off-nominal taps from 0.85 to 1.15.
REAL_MODEL_BUSES = """\
ORB220,Orrin Bay,220,false,0,-150,Orrin Bay 220 kV
ORBSTAR,Orrin Bay,220,true,0,0,Orrin Bay T3 star point
ORBG21,Orrin Bay,21,false,0,0,Orrin Bay unit 1 terminal
TLR132B,Tallis Reach,132,false,0,0,Tallis Reach 132 kV bar B
TLRAUX,Tallis Reach,0.4,false,0,0,Tallis Reach station service
FNHSC,Fenwick Hollow,132,true,0,0,Fenwick Hollow series capacitor terminal
"""

REAL_MODEL_BRANCHES = """\
FNH-TLR-2,FNH132,TLR132,0.012,0.061,0.021,1,0,line,true,Fenwick–Tallis circuit 2
FNH-SC2,FNH132,FNHSC,0,-0.018,0,1,0,series_capacitor,true,Fenwick Hollow series capacitor
FNHSC-ORB,FNHSC,ORB132,0.010,0.050,0.017,1,0,line,true,Fenwick–Orrin circuit 2
TLR-CPL,TLR132,TLR132B,0,0.00001,0,1,0,line,true,Tallis Reach bus coupler
TLR-T2,TLR132B,TLR33,0.004,0.125,0,0.85,0,transformer,true,Tallis Reach T2
ORB-PST,ORB132,TLR132B,0.001,0.080,0,1,-12.5,transformer,true,Orrin Bay phase shifter
ORB-T3H,ORB220,ORBSTAR,0.0008,0.095,0,1,0,transformer,true,Orrin Bay T3 220 kV winding
ORB-T3M,ORBSTAR,ORB132,0.0005,-0.006,0,1,0,transformer,true,Orrin Bay T3 132 kV winding
ORB-T3L,ORBSTAR,ORBG21,0.0009,0.140,0,1.15,0,transformer,true,Orrin Bay T3 21 kV winding
TLR-AUX,TLR33,TLRAUX,0.9,4.2,0,1.025,0,transformer,true,Tallis Reach station transformer
"""


def real_model_files() -> SiteFiles:
    """The invented site with the real-model rows added to its network."""
    files = SiteFiles()
    for row in csv.reader(io.StringIO(REAL_MODEL_BUSES)):
        files.buses.add_row(row)
    for row in csv.reader(io.StringIO(REAL_MODEL_BRANCHES)):
        files.branches.add_row(row)
    return files


def row_of(table: Table, ident: str) -> int:
    """The spreadsheet row of the record whose first cell is ``ident``."""
    return next(i + 2 for i, r in enumerate(table.rows) if r[0] == ident)
