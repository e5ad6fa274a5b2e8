"""A seeded corpus of bad inputs, mutated from the demo export and the desk's forms.

``bad_csv_files(export, seed, count)`` takes the demo's exported files (kind
-> text) and yields ``BadFile``s: a few of an export's rows, one of them (or
the file's structure) broken in a way the register must refuse, with what a
message about it must name.  ``bad_desk_posts(...)`` does the same for the
check-out and check-in forms.  Only ``random.Random(seed)`` decides, so a seed
gives the same corpus every time.

Every mutation is one the rules refuse whatever the row it lands on: a value
no column of that type accepts, a required cell left empty, a reference to
nothing, broken quoting, a NUL byte, bytes that are not UTF-8, a header that
names no kind.  The values come from the issues found by hand and by earlier
generated runs (numbers beyond any float, the ends of the calendar, 1 pF in a
can, a quote that never closes).
"""

import csv
import io
import random
from dataclasses import dataclass, field

from fleet.csvio import COLUMNS

#: Values each column type refuses in any row (a list per type).
BAD_BY_TYPE = {
    "number": ["abc", "1e999999999", "1e1000000", "-5", "12 parsecs", "NaN", "inf", "1e999999 M", "1,5", "0x1F",
               "7" * 120],
    "whole": ["1e999999999", "1978.5", "19z9", "1e1000000", "-1e400"],
    "temp": ["1e999999999", "85 K", "-300", "hot", "100 °F", "1e400"],
    "rated_temp": ["200", "-100", "85 F", "1e999999999"],
    "bool": ["perhaps", "2", "yes please"],
    "date": ["0001-01-01", "9999-12-31", "2024-02-30", "soon", "1899-12-31", "2024-1-5"],
    "datetime": ["9999-12-31T23:59:59-05:00", "0001-01-01 00:00", "2024-13-01 00:00", "noon",
                 "1899-12-31T23:00:00Z", "2024-10-27 01:30"],
    "capacitance": ["1e999999F", "47", "47MF", "0u", "-4u7", "1p", "4u7u", "1e-999999p", "uF"],
    "choice": ["maybe-not", "OUT-ish", "-"],
    "monthly": ["1;2;3", "x;2;3;4;5;6;7;8;9;10;11;12", "1;2;3;4;5;6;7;8;9;10;11;1e999999999"],
}
#: Reference and key columns: values that refer to nothing or break the key's
#: rules (``(kind, column)``; a new maker in a gear models file is simply a new
#: gear model, so there only a name too long for the register is refused).
BAD_BY_COLUMN = {
    ("units", "asset_tag"): ["bad tag!", "A", "x" * 30, "cb-0001"],
    ("positions", "designator"): ["??", "C", "12C", "C" + "9" * 9],
    ("temperature_samples", "location"): ["Nowhere Store"],
    ("units", "home_location"): ["Nowhere Store"],
    ("units", "maker"): ["Nonesuch Instruments"],
    ("units", "model_name"): ["Model That Never Was"],
    ("positions", "maker"): ["Nonesuch Instruments"],
    ("positions", "model_name"): ["Model That Never Was"],
    ("positions", "pump_partner"): ["C999"],
    ("units", "serial"): ["S" * 70],
    ("locations", "name"): ["N" * 90],
    ("gear_models", "maker"): ["M" * 90],
    ("gear_models", "model_name"): ["M" * 90],
}
#: The columns a message may name for a broken cell (a maker that matches no
#: gear model is reported on the model name, as the pair is looked up).
ALSO_NAMED = {"maker": {"model_name"}, "model_name": {"maker"}}


@dataclass
class BadFile:
    name: str
    data: bytes
    how: str
    row: int = None        # the row a message must name (header = row 1), or None
    line: int = None       # else the line
    columns: set = field(default_factory=set)  # one of these a message must name (empty: any or none)


def _write(rows):
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(rows)
    return out.getvalue()


def _rows(text):
    return list(csv.reader(io.StringIO(text)))


def _sample(rng, rows, most=12):
    """The header and a run of a few data rows."""
    header, body = rows[0], rows[1:]
    k = rng.randint(1, min(most, len(body)))
    start = rng.randint(0, len(body) - k)
    return header, [list(r) for r in body[start:start + k]]


def _cell_mutation(rng, kind, header, body):
    cols = {c.name: c for c in COLUMNS[kind]}
    index = {name.strip().lower(): i for i, name in enumerate(header)}
    choices = []
    for name, col in cols.items():
        bad = list(BAD_BY_COLUMN.get((kind, name), []))
        if col.type in BAD_BY_TYPE:
            bad += BAD_BY_TYPE[col.type]
        if col.required:
            bad.append("")
        bad.append("ok\x00nul")  # a NUL is refused in every column
        choices += [(name, v) for v in bad]
    name, value = rng.choice(choices)
    r = rng.randrange(len(body))
    body[r][index[name]] = value
    if name == "pump_partner":  # only a pump partner naming no position of the model is refused
        body[r][index["designator"]] = body[r][index["designator"]] or "C1"
    columns = {name} | ALSO_NAMED.get(name, set())
    if value == "" or "\x00" in value:
        how = f"{'empty required' if value == '' else 'NUL in'} {name}"
    else:
        how = f"{name} = {value[:30]!r}"
    return how, r + 2, columns


def _structure_mutation(rng, kind, header, body):
    """(how, text or bytes, row, line, columns) for a broken file structure."""
    width = len(header)
    r = rng.randrange(len(body))
    c = rng.randrange(width)
    what = rng.choice(["stray quote", "stray quote last", "bare cr", "bom in header", "bad utf8", "extra cell",
                       "missing cell", "duplicate row", "unknown column", "missing column", "twice column",
                       "lone cr", "long value"])
    if what in ("stray quote", "stray quote last"):
        c = width - 1 if what == "stray quote last" else c
        lines = _write([header] + body).split("\n")
        cells = next(csv.reader([lines[r + 1]]))
        cells = [cell.replace('"', "") for cell in cells]
        cells[c] = '"' + cells[c]
        lines[r + 1] = ",".join(cells)
        extra = "\n".join(",".join(f"x{k}" for k in range(width)) for _ in range(rng.randint(0, 3)))
        text = "\n".join(lines[:-1] + ([extra] if extra else [])) + "\n"
        return f"{what} in {header[c]}", text, r + 2, None, {header[c]}
    if what == "bare cr":
        return what, _write([header] + body).replace("\n", "\r"), None, 1, set()
    if what == "lone cr":
        body[r][c] = (body[r][c] or "x") + "\rmore"
        text = _write([header] + body)
        text = text.replace('"' + body[r][c] + '"', body[r][c])  # unquoted, as a careless tool writes it
        return what, text, None, r + 2, set()
    if what == "bom in header":
        header = list(header)
        header[c] = "\ufeff" + header[c]
        text = _write([header] + body)
        return what, ("\ufeff" + text) if c == 0 else text, 1, None, set()
    if what == "bad utf8":
        data = _write([header] + body).encode("utf-8")
        lines = data.split(b"\n")
        at = rng.randint(0, len(lines[r + 1]))
        lines[r + 1] = lines[r + 1][:at] + bytes([rng.choice([0x80, 0xC3, 0xFF, 0xFE])]) + lines[r + 1][at:]
        return what, b"\n".join(lines), None, r + 2, set()
    if what == "extra cell":
        body[r].append("extra")  # a cell beyond the header, with something in it
        return what, _write([header] + body), r + 2, None, set()
    if what == "missing cell":
        del body[r][c]
        return what, _write([header] + body), r + 2, None, set()
    if what == "duplicate row":
        body.insert(r + 1, list(body[r]))
        return what, _write([header] + body), r + 3, None, set()
    if what == "long value":
        cols = [col.name for col in COLUMNS[kind] if col.type != "notes"]
        name = rng.choice(cols)
        body[r][header.index(name)] = "9" * 5000
        return what, _write([header] + body), r + 2, None, {name}
    header = list(header)
    if what == "unknown column":
        header[c] = "colour"
    elif what == "missing column":
        del header[c]
        body = [row[:c] + row[c + 1:] for row in body]
    else:  # twice column
        header[c] = header[(c + 1) % width]
    return what, _write([header] + body), 1, None, set()


def bad_csv_files(export, *, seed, count):
    """``count`` bad files mutated from ``export`` (kind -> CSV text of the demo)."""
    rng = random.Random(seed)
    kinds = sorted(export)
    parsed = {k: _rows(export[k]) for k in kinds}
    for n in range(count):
        kind = rng.choice(kinds)
        header, body = _sample(rng, parsed[kind])
        name = f"{kind}-{n:04d}.csv"
        if rng.random() < 0.6:
            how, row, columns = _cell_mutation(rng, kind, header, body)
            yield BadFile(name, _write([header] + body).encode("utf-8"), how, row=row, columns=columns)
        else:
            how, text, row, line, columns = _structure_mutation(rng, kind, header, body)
            data = text if isinstance(text, bytes) else text.encode("utf-8")
            yield BadFile(name, data, how, row=row, line=line, columns=columns)


# --- the desk's forms ---------------------------------------------------------------------------

#: Field values each desk form refuses, whatever the unit.
BAD_DESK_VALUES = {
    "asset_tag": ["", "NO-SUCH-TAG", "\x00", "X" * 50, "CB-00\x0001"],
    "job_ref": ["", "J" * 41, "JOB\x001"],
    "expected_ambient_c": ["", "warm", "NaN", "inf", "1e999", "-300", "200", "24\x00"],
    "venue_ambient_c": ["", "warm", "NaN", "-inf", "1e999", "-300", "200"],
    "powered_hours": ["-1", "lots", "NaN", "inf", "1e999", "1e308", "1000000"],
    "meter_reading_h": ["-1", "many", "NaN", "1e999"],
    "reported_faults": ["F" * 2001, "hum\x00"],
    "out_at": ["0001-01-01T00:00", "9999-12-31T23:59", "1899-12-31T23:00", "yesterday", "2024-02-30T10:00",
               "2024-13-01T10:00"],
    "in_at": ["0001-01-01T00:00", "9999-12-31T23:59", "1899-12-31T23:00", "later", "2024-02-30T10:00"],
}
CHECK_OUT_FIELDS = ("asset_tag", "job_ref", "expected_ambient_c", "out_at")
CHECK_IN_FIELDS = ("asset_tag", "venue_ambient_c", "powered_hours", "meter_reading_h", "reported_faults", "in_at")


@dataclass
class BadPost:
    form: str      # "check_out" or "check_in"
    data: dict
    how: str
    field: str     # the field a message must name (or "__all__" for a rule of the whole form)


def bad_desk_posts(*, available_tags, out_tags, seed, count):
    """``count`` bad posts to the check-out and check-in forms: good data for a
    real unit with one field broken (or a rule of the whole form broken)."""
    rng = random.Random(seed)
    for n in range(count):
        if rng.random() < 0.5:
            data = {"asset_tag": rng.choice(available_tags), "job_ref": f"JOB-{n}", "expected_ambient_c": "24",
                    "out_at": ""}
            form, fields = "check_out", CHECK_OUT_FIELDS
        else:
            data = {"asset_tag": rng.choice(out_tags), "venue_ambient_c": "24", "powered_hours": "0.5",
                    "meter_reading_h": "", "reported_faults": "", "in_at": ""}
            form, fields = "check_in", CHECK_IN_FIELDS
        name = rng.choice(fields)
        value = rng.choice(BAD_DESK_VALUES[name])
        data[name] = value
        expected = name
        if form == "check_in" and name == "meter_reading_h":
            data["powered_hours"] = ""  # the meter alone; a unit without a reading is refused as a whole
            expected = "__all__" if value not in ("-1", "many", "NaN", "1e999") else name
        if form == "check_in" and name == "powered_hours" and value in ("1e308", "1000000"):
            expected = "__all__"  # more hours than the unit was out: the rules refuse the whole check-in
        if expected != "__all__" and rng.random() < 0.1:  # now and then a field left out altogether
            missing = rng.choice([f for f in fields if f not in ("asset_tag", name)])
            data.pop(missing)
        yield BadPost(form, data, f"{form}: {name} = {value[:30]!r}", expected)
