# jcamp_read.py: reference check of the JCAMP-DX and CSV exports. A JCAMP-DX
# reader written from the standard's rules, not from analysis/export.c: it
# reads the files test_export leaves in $B/tests/export (B default build) and
# compares them with what that test meant to write (expected.json there).
# Not a general converter: LINK blocks, peak tables and 2D NTUPLES are refused.
# Run from the repository root after test_export:
#   /usr/bin/python3 tests/ref/jcamp_read.py        Exit 0 when all agree.
#
# Sources (as reference-checks.md asks), cited by tag at each rule below:
#   [4.24] R. S. McDonald, P. A. Wilks, "JCAMP-DX: A Standard Form for Exchange
#          of Infrared Spectra in Computer Readable Form", Appl. Spectrosc. 42,
#          151 (1988). Read: its opening only (labelled fields of printable
#          ASCII in a text file). The rest of what is tagged [4.24] is from
#          memory, except where a rule says what else was read.
#   [NMR]  A. N. Davies, P. Lampen, "JCAMP-DX for NMR", Appl. Spectrosc. 47,
#          1093 (1993), JCAMP-DX 5.01. The paper itself was not read; read were
#          the IUPAC working party's nD-NMR test-file notes (the NTUPLES
#          attribute labels and their INDEPENDENT / DEPENDENT, AFFN / ASDF,
#          HZ / SECONDS / ARBITRARY UNITS values, variables FID/REAL, FID/IMAG
#          with symbols R, I) and its test-data index (the (X++(Y..Y)) table
#          for equally spaced X; AFFN, PAC, SQZ, DIF, DUP forms). Everything
#          else tagged [NMR] is from memory.
import datetime
import json
import os
import re
import sys

import numpy

FOLDER = os.path.join(os.environ.get("B") or "build", "tests", "export")
EXPECTED = os.path.join(FOLDER, "expected.json")

# Tolerances. Values: the writer's integers carry nine significant digits of
# the largest |value| (quantization 5e-10 of it), so 1e-8 of that full scale
# catches any wrong factor, offset or lost point while leaving room. Axis
# numbers are printed to read back exactly; 1e-12 relative allows only
# rounding. An X check (a line's leading abscissa) is compared to 1e-6 of a
# step: this writer prints it to 15 digits (common practice, no source).
REL_VALUE = 1e-8
REL_AXIS = 1e-12
X_CHECK = 1e-6

failures = []


class JcampError(Exception):
    """A file that breaks a rule of the standard, or disagrees with itself."""


def fail(message):
    failures.append(message)
    print("FAIL: " + message)


# ---- labelled data records ---------------------------------------------

def normalize(label):
    """[4.24] labels compare ignoring case, blanks, '-', '/' and '_' (from
    memory): '##Data Type=' and '##DATATYPE=' are one label."""
    return re.sub(r"[\s\-/_]", "", label).upper()


def strip_comment(line):
    """[4.24] '$$' starts a comment that runs to the end of the line (from memory)."""
    at = line.find("$$")
    return line if at < 0 else line[:at]


def records(text):
    """The labelled data records of a file as (label, lines) in order: [4.24]
    '##LABEL=' starts a record at the start of a line, and its value runs on
    over the following lines until the next '##' (from memory)."""
    out = []
    for number, raw in enumerate(text.split("\n"), 1):
        line = strip_comment(raw.rstrip("\r"))
        if raw.startswith("##"):
            eq = line.find("=")
            if eq < 0:
                raise JcampError("line %d: a label without '='" % number)
            out.append((normalize(line[2:eq]), [line[eq + 1:]], number))
        elif out:
            out[-1][1].append(line)
        elif line.strip():
            raise JcampError("line %d: text before the first label" % number)
        if len(raw.rstrip("\r")) > 80:
            # [4.24] lines of at most 80 characters (from memory)
            raise JcampError("line %d has %d characters, more than 80" % (number, len(raw)))
        if any(ord(c) < 0x20 or ord(c) > 0x7E for c in raw.rstrip("\r")):
            # [4.24] printable ASCII only (read)
            raise JcampError("line %d has a character outside printable ASCII" % number)
    return out


def text_value(lines):
    """A TEXT or STRING value: its lines joined by blanks, trimmed."""
    return " ".join(part.strip() for part in lines if part.strip())


def number(lines, label):
    try:
        return float(text_value(lines))
    except ValueError:
        raise JcampError("##%s= is not a number: %r" % (label, text_value(lines)))


def items(lines):
    """[NMR] an NTUPLES attribute list: one comma-separated item per
    variable, possibly continued over lines (read in the nD-NMR notes)."""
    return [part.strip() for part in text_value(lines).split(",")]


# ---- ASDF and AFFN ordinates -------------------------------------------
# [4.24] pseudo-digits (the tables from memory; checked against a question-
# and-answer page that lists the same tables): SQZ starts an absolute value,
# its first digit and sign in one letter; DIF a difference from the previous
# ordinate; DUP repeats the previous token, the count including that token.
SQZ = {"@": 0, **{c: i + 1 for i, c in enumerate("ABCDEFGHI")},
       **{c: -(i + 1) for i, c in enumerate("abcdefghi")}}
DIF = {"%": 0, **{c: i + 1 for i, c in enumerate("JKLMNOPQR")},
       **{c: -(i + 1) for i, c in enumerate("jklmnopqr")}}
DUP = {**{c: i + 1 for i, c in enumerate("STUVWXYZ")}, "s": 9}
# [4.24] AFFN: sign, digits, decimal point, and E followed immediately by a
# signed power of ten (read as quoted from the standard in a third party's
# notes). E without a sign is the SQZ digit +5, so it ends the number. PAC
# (read in the test-data index): '+' and '-' also separate numbers.
AFFN = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)(E[+-]\d{1,3})?")


def signed(first, tail):
    """A pseudo-digit's signed first digit followed by the digits after it."""
    value = float(int(str(abs(first)) + tail))
    return -value if first < 0 else value


def tokens(line, where):
    """(kind, value) of a data line: 'affn', 'sqz', 'dif' or 'dup'."""
    out, i = [], 0
    while i < len(line):
        c = line[i]
        if c in " \t,;":
            i += 1
            continue
        m = AFFN.match(line, i)
        if m:
            out.append(("affn", float(m.group(0))))
            i = m.end()
            continue
        j = i + 1
        while j < len(line) and line[j].isdigit():
            j += 1
        tail = line[i + 1:j]
        if c in SQZ:
            out.append(("sqz", signed(SQZ[c], tail)))
        elif c in DIF:
            out.append(("dif", signed(DIF[c], tail)))
        elif c in DUP:
            out.append(("dup", int(str(DUP[c]) + tail)))
        else:
            raise JcampError("%s: character %r is not AFFN or ASDF" % (where, c))
        i = j
    return out


def decode_lines(lines, where):
    """The (X++(Y..Y)) lines as (x_checks, ordinates): x_checks holds, per
    line, (the line's X as written, the index of the ordinate it belongs to).
    [4.24] a line that ends in DIF form is followed by one whose first
    ordinate repeats the last one as a check; it is compared, then dropped,
    and the line's X belongs to it (from memory)."""
    ys, checks, ended_in_dif = [], [], False
    for number, line in enumerate(lines, 1):
        here = "%s, data line %d" % (where, number)
        toks = tokens(line, here)
        if not toks:
            continue
        if toks[0][0] != "affn":
            raise JcampError("%s: does not start with an AFFN abscissa" % here)
        x = toks[0][1]
        line_ys, last, last_dif = [], None, None
        for kind, value in toks[1:]:
            if kind in ("affn", "sqz"):
                last, last_dif = value, None
                line_ys.append(value)
            elif kind == "dif":
                base = line_ys[-1] if line_ys else None
                if base is None:
                    raise JcampError("%s: a difference with no ordinate before it" % here)
                last, last_dif = base + value, value
                line_ys.append(last)
            else:
                if last is None:
                    raise JcampError("%s: a repeat count with nothing to repeat" % here)
                for _ in range(value - 1):
                    last = last + last_dif if last_dif is not None else last
                    line_ys.append(last)
        if not line_ys:
            raise JcampError("%s: an abscissa with no ordinates" % here)
        if ended_in_dif:
            if not ys or line_ys[0] != ys[-1]:
                raise JcampError("%s: the check ordinate %r differs from the previous line's "
                                 "last %r" % (here, line_ys[0], ys[-1] if ys else None))
            checks.append((x, len(ys) - 1))
            line_ys = line_ys[1:]
        else:
            checks.append((x, len(ys)))
        ys.extend(line_ys)
        ended_in_dif = last_dif is not None
    return checks, numpy.array(ys, dtype=float)


def decode_table(lines, where, xfactor, yfactor, firstx, lastx, npoints):
    """Ordinates of an equally spaced table, in real units, after checking
    every line's X: [4.24] the abscissa of point i is FIRSTX + i * (LASTX -
    FIRSTX) / (NPOINTS - 1), each line's leading X (times XFACTOR) is that of
    its first ordinate, and ordinates are integers times YFACTOR (from
    memory; (X++(Y..Y)) for equally spaced X read in the test-data index)."""
    checks, raw = decode_lines(lines, where)
    if len(raw) != npoints:
        raise JcampError("%s: %d ordinates, NPOINTS says %d" % (where, len(raw), npoints))
    if npoints < 2:
        raise JcampError("%s: fewer than 2 points" % where)
    deltax = (lastx - firstx) / (npoints - 1)
    for x, index in checks:
        want = firstx + index * deltax
        if abs(x * xfactor - want) > X_CHECK * abs(deltax):
            raise JcampError("%s: line X %r (x %r) where point %d is at %r"
                             % (where, x, x * xfactor, index, want))
    # The last point lies at LASTX: from the last line's X and its count.
    x, index = checks[-1]
    end = x * xfactor + (npoints - 1 - index) * deltax
    if abs(end - lastx) > X_CHECK * abs(deltax) + REL_AXIS * abs(lastx):
        raise JcampError("%s: the last point is at %r, LASTX says %r" % (where, end, lastx))
    return raw * yfactor, deltax


def check_near(got, want, unit, what):
    """got and want within one unit of the last place (the factor)."""
    if abs(got - want) > abs(unit) * 1.0000001:
        raise JcampError("%s is %r, the data give %r" % (what, got, want))


# ---- blocks -------------------------------------------------------------

CORE = ["TITLE", "JCAMPDX", "DATATYPE", "ORIGIN", "OWNER"]          # [4.24] (from memory)
CORE_XY = ["XUNITS", "YUNITS", "XFACTOR", "YFACTOR", "FIRSTX", "LASTX", "NPOINTS",
           "FIRSTY", "XYDATA"]                                        # [4.24] (from memory)
NMR = [".OBSERVEFREQUENCY", ".OBSERVENUCLEUS"]                        # [NMR] (from memory)
NTUPLE_LISTS = ["VARNAME", "SYMBOL", "VARTYPE", "VARFORM", "VARDIM", "UNITS", "FIRST",
                "LAST", "FACTOR"]                                     # [NMR] (read)
# Labels this project's writer promises beyond the standard's required ones.
PROJECT = ["DATACLASS", ".ACQUISITIONMODE", "$PRECESSRUN", "$PRECESSVERSION"]


def split_block(recs):
    """One block: [4.24] ##TITLE= first, ##JCAMP-DX= second, ##END= last, each
    label once (from memory). Returns (labels, ntuples) where ntuples is None
    or (attribute records, pages as lists of records)."""
    if not recs or recs[0][0] != "TITLE":
        raise JcampError("the first label is not ##TITLE=")
    if len(recs) < 2 or recs[1][0] != "JCAMPDX":
        raise JcampError("the second label is not ##JCAMP-DX=")
    if recs[-1][0] != "END" or sum(1 for r in recs if r[0] == "END") != 1:
        raise JcampError("the block does not end with its one ##END=")
    labels, i, ntuples = {}, 0, None
    while i < len(recs) - 1:
        label, lines, line = recs[i]
        if label == "NTUPLES":
            j = next((k for k in range(i, len(recs)) if recs[k][0] == "ENDNTUPLES"), None)
            if j is None:
                raise JcampError("##NTUPLES= without ##END NTUPLES=")
            ntuples = split_ntuples(recs[i:j + 1])
            labels["NTUPLES"], labels["ENDNTUPLES"] = lines, recs[j][1]
            i = j + 1
            continue
        if label in labels:
            raise JcampError("line %d: ##%s= a second time" % (line, label))
        labels[label] = lines
        i += 1
    labels["END"] = recs[-1][1]
    return labels, ntuples


def split_ntuples(recs):
    """[NMR] the attribute lists between ##NTUPLES= and the first ##PAGE=,
    then pages, each from its ##PAGE= to the next (from memory)."""
    attrs, pages = {}, []
    for label, lines, line in recs[1:-1]:
        if label == "PAGE":
            pages.append({"PAGE": lines})
        elif pages:
            if label in pages[-1]:
                raise JcampError("line %d: ##%s= twice in one page" % (line, label))
            pages[-1][label] = lines
        else:
            attrs[label] = lines
    if text_value(recs[0][1]) != text_value(recs[-1][1]):
        raise JcampError("##END NTUPLES= does not name the ##NTUPLES= form")
    return attrs, pages


def require(labels, names, what):
    missing = [n for n in names if n not in labels]
    if missing:
        raise JcampError("%s label(s) missing: %s" % (what, ", ".join(missing)))


def read_xydata(labels, where):
    """A block's (X++(Y..Y)) table in real units, with its own checks."""
    require(labels, CORE_XY, "core (XYDATA form)")
    lines = labels["XYDATA"]
    if re.sub(r"\s", "", lines[0]) != "(X++(Y..Y))":
        raise JcampError("##XYDATA= %s is not (X++(Y..Y))" % lines[0].strip())
    g = {k: number(labels[k], k) for k in ["XFACTOR", "YFACTOR", "FIRSTX", "LASTX", "FIRSTY"]}
    npoints = int(number(labels["NPOINTS"], "NPOINTS"))
    y, deltax = decode_table(lines[1:], where, g["XFACTOR"], g["YFACTOR"], g["FIRSTX"],
                             g["LASTX"], npoints)
    # [4.24] FIRSTY is the first ordinate in YUNITS; MAXY, MINY when given
    # bound the data; DELTAX when given is the step (from memory).
    check_near(g["FIRSTY"], y[0], g["YFACTOR"], "FIRSTY")
    if "MAXY" in labels:
        check_near(number(labels["MAXY"], "MAXY"), y.max(), g["YFACTOR"], "MAXY")
    if "MINY" in labels:
        check_near(number(labels["MINY"], "MINY"), y.min(), g["YFACTOR"], "MINY")
    if "DELTAX" in labels:
        close(number(labels["DELTAX"], "DELTAX"), deltax, "DELTAX (from LASTX, FIRSTX, NPOINTS)")
    return {"firstx": g["FIRSTX"], "deltax": deltax, "y": y,
            "xunits": text_value(labels["XUNITS"]), "yunits": text_value(labels["YUNITS"])}


def read_ntuples(ntuples, where):
    """[NMR] the pages of a 1D NTUPLES block as {symbol: values} in real
    units, each checked against the FIRST, LAST, MIN, MAX lists (from
    memory; the list names read in the nD-NMR notes)."""
    attrs, pages = ntuples
    require(attrs, NTUPLE_LISTS, "NTUPLES")
    cols = {k: items(v) for k, v in attrs.items() if k in NTUPLE_LISTS + ["MIN", "MAX"]}
    symbols = cols["SYMBOL"]
    if any(len(v) != len(symbols) for v in cols.values()):
        raise JcampError("the NTUPLES lists differ in length")
    col = {s: {k: v[i] for k, v in cols.items()} for i, s in enumerate(symbols)}
    out = {}
    for page in pages:
        require(page, ["PAGE", "NPOINTS", "DATATABLE"], "page")
        form = items(page["DATATABLE"][:1])
        m = re.fullmatch(r"\((\w+)\+\+\((\w+)\.\.(\w+)\)\)", re.sub(r"\s", "", form[0]))
        if not m or m.group(2) != m.group(3) or len(form) < 2 or form[1].upper() != "XYDATA":
            raise JcampError("##DATA TABLE= %s is not (X++(Y..Y)), XYDATA" % ", ".join(form))
        xs, ys = m.group(1), m.group(2)
        if xs not in col or ys not in col:
            raise JcampError("##DATA TABLE= names a symbol not in ##SYMBOL=")
        if col[xs]["VARTYPE"] != "INDEPENDENT" or col[ys]["VARTYPE"] != "DEPENDENT":
            raise JcampError("%s is not INDEPENDENT or %s not DEPENDENT" % (xs, ys))
        npoints = int(number(page["NPOINTS"], "NPOINTS"))
        if int(col[ys]["VARDIM"]) != npoints or int(col[xs]["VARDIM"]) != npoints:
            raise JcampError("page %s: NPOINTS %d, VAR_DIM %s" % (text_value(page["PAGE"]),
                                                                   npoints, col[ys]["VARDIM"]))
        f = {k: float(col[xs][k]) for k in ["FACTOR", "FIRST", "LAST"]}
        yf = float(col[ys]["FACTOR"])
        here = "%s page %s" % (where, text_value(page["PAGE"]))
        y, deltax = decode_table(page["DATATABLE"][1:], here, f["FACTOR"], yf, f["FIRST"],
                                 f["LAST"], npoints)
        check_near(float(col[ys]["FIRST"]), y[0], yf, "FIRST of " + ys)
        check_near(float(col[ys]["LAST"]), y[-1], yf, "LAST of " + ys)
        if "MIN" in col[ys]:
            check_near(float(col[ys]["MIN"]), y.min(), yf, "MIN of " + ys)
            check_near(float(col[ys]["MAX"]), y.max(), yf, "MAX of " + ys)
        out[ys] = y
        out["firstx"], out["deltax"], out["xunits"] = f["FIRST"], deltax, col[xs]["UNITS"]
        out["units " + ys] = col[ys]["UNITS"]
    return out


def read_file(path):
    """Every check a file can make of itself; the labels and data."""
    with open(path, "rb") as f:
        raw = f.read()
    try:
        text = raw.decode("ascii")
    except UnicodeDecodeError:
        raise JcampError("not ASCII")
    labels, ntuples = split_block(records(text))
    require(labels, CORE + ["END"], "core")
    kind = text_value(labels["DATATYPE"]).upper()
    if kind == "LINK":
        raise JcampError("LINK blocks are not read here")
    if kind.startswith("NMR"):
        require(labels, NMR, "NMR")
    where = os.path.basename(path)
    if ntuples is not None:
        data = read_ntuples(ntuples, where)
    else:
        data = read_xydata(labels, where)
    return labels, data


# ---- the files against what test_export meant -----------------------------

def nucleus_label(nucleus):
    """[NMR] ##.OBSERVE NUCLEUS= ^1H: a caret before the mass number (from memory)."""
    return "^" + nucleus if nucleus[:1].isdigit() else nucleus


def longdate_instant(value):
    """[NMR] ##LONGDATE= YYYY/MM/DD HH:MM:SS[.fraction] [+hhmm] (from memory)."""
    m = re.fullmatch(r"(\d{4})/(\d\d)/(\d\d) (\d\d):(\d\d):(\d\d)(\.\d+)?(?: ([+-])(\d\d)(\d\d))?",
                     value)
    if not m:
        raise JcampError("##LONGDATE= %r is not YYYY/MM/DD HH:MM:SS" % value)
    g = m.groups()
    micro = int(round(float(g[6]) * 1e6)) if g[6] else 0
    zone = datetime.timezone.utc
    if g[7]:
        sign = 1 if g[7] == "+" else -1
        zone = datetime.timezone(sign * datetime.timedelta(hours=int(g[8]), minutes=int(g[9])))
    return datetime.datetime(*map(int, g[:6]), micro, tzinfo=zone)


def compare_values(got, want, what):
    """Largest error as a fraction of the full scale (max |want|)."""
    want = numpy.asarray(want, dtype=float)
    if got.shape != want.shape:
        raise JcampError("%s: %d values, want %d" % (what, got.size, want.size))
    scale = numpy.max(numpy.abs(want)) or 1.0
    worst = float(numpy.max(numpy.abs(got - want))) / scale
    if worst > REL_VALUE:
        raise JcampError("%s: off by %.3g of full scale" % (what, worst))
    return worst


def close(got, want, what):
    if abs(got - want) > REL_AXIS * max(abs(want), 1e-300):
        raise JcampError("%s is %r, want %r" % (what, got, want))


def check_meta(labels, exp):
    if "title" in exp and text_value(labels["TITLE"]) != " ".join(exp["title"].split()):
        raise JcampError("##TITLE= %r" % text_value(labels["TITLE"]))
    if text_value(labels["ORIGIN"]) != exp["origin"]:
        raise JcampError("##ORIGIN= %r" % text_value(labels["ORIGIN"]))
    version = text_value(labels["JCAMPDX"])
    if not version.startswith("5.01"):
        raise JcampError("##JCAMP-DX= %s, want 5.01" % version)
    require(labels, PROJECT, "promised")
    if text_value(labels[".OBSERVENUCLEUS"]) != nucleus_label(exp["nucleus"]):
        raise JcampError("##.OBSERVE NUCLEUS= %s" % text_value(labels[".OBSERVENUCLEUS"]))
    # [NMR] the observe frequency in MHz (from memory)
    mhz = number(labels[".OBSERVEFREQUENCY"], ".OBSERVE FREQUENCY")
    if mhz != abs(exp["observe_frequency"]) / 1e6:
        raise JcampError("##.OBSERVE FREQUENCY= %r MHz, want %r"
                         % (mhz, abs(exp["observe_frequency"]) / 1e6))
    if exp.get("when"):
        require(labels, ["LONGDATE"], "date")
        want = datetime.datetime.fromisoformat(exp["when"].replace("Z", "+00:00"))
        if longdate_instant(text_value(labels["LONGDATE"])) != want:
            raise JcampError("##LONGDATE= %s is not %s"
                             % (text_value(labels["LONGDATE"]), exp["when"]))
    elif "LONGDATE" in labels:
        raise JcampError("##LONGDATE= without a date given")


def check_fid(exp):
    labels, data = read_file(os.path.join(FOLDER, exp["file"]))
    check_meta(labels, exp)
    if text_value(labels["DATATYPE"]) != "NMR FID" or data["xunits"] != "SECONDS":
        raise JcampError("DATA TYPE %s, XUNITS %s"
                         % (text_value(labels["DATATYPE"]), data["xunits"]))
    if text_value(labels.get("$PRECESSUNITS", [""])) != exp["units"]:
        raise JcampError("##$PRECESS UNITS= is not %s" % exp["units"])
    close(data["firstx"], exp["t0"], "FIRSTX")
    close(data["deltax"], exp["dt"], "the X step")
    return compare_values(data["y"], exp["y"], exp["file"])


def check_spectrum(exp):
    labels, data = read_file(os.path.join(FOLDER, exp["file"]))
    check_meta(labels, exp)
    if text_value(labels["DATATYPE"]) != "NMR SPECTRUM" or data["xunits"] != "HZ":
        raise JcampError("DATA TYPE %s, X UNITS %s"
                         % (text_value(labels["DATATYPE"]), data["xunits"]))
    if "R" not in data or "I" not in data:
        raise JcampError("no real (R) or imaginary (I) page")
    if abs(data["firstx"] - exp["f0"]) > REL_AXIS * exp["df"]:
        raise JcampError("FIRST of X is %r, want %r" % (data["firstx"], exp["f0"]))
    close(data["deltax"], exp["df"], "the X step")
    return max(compare_values(data["R"], exp["re"], "real page"),
               compare_values(data["I"], exp["im"], "imaginary page"))


def check_csv(exp):
    """The comment line's key=value words, then time,value rows read with
    numpy: times t0 + i / rate, values the same float32 (source: numpy
    (reference library), numpy.loadtxt)."""
    path = os.path.join(FOLDER, exp["file"])
    with open(path) as f:
        head, columns = f.readline(), f.readline()
    words = dict(w.split("=", 1) for w in head.split() if "=" in w)
    for key in ["run", "input", "units"]:
        if words.get(key) != exp[key]:
            raise JcampError("CSV header %s=%r, want %r" % (key, words.get(key), exp[key]))
    if int(words.get("shot", -1)) != exp["shot"]:
        raise JcampError("CSV header shot=%r" % words.get("shot"))
    close(float(words["sample_rate"]), exp["sample_rate"], "CSV sample_rate")
    close(float(words["t0"]), exp["t0"], "CSV t0")
    if columns.strip() != "time,value":
        raise JcampError("CSV column line %r, want time,value" % columns.strip())
    table = numpy.loadtxt(path, delimiter=",", skiprows=2, ndmin=2)
    want = numpy.asarray(exp["values"], dtype=numpy.float32)
    if table.shape != (want.size, 2):
        raise JcampError("CSV has %s rows and columns, want %d x 2" % (table.shape, want.size))
    t = exp["t0"] + numpy.arange(want.size) / exp["sample_rate"]
    if numpy.max(numpy.abs(table[:, 0] - t)) > REL_AXIS * numpy.max(numpy.abs(t)):
        raise JcampError("CSV times are not t0 + i / sample_rate")
    if not numpy.array_equal(table[:, 1].astype(numpy.float32), want):
        raise JcampError("CSV values do not read back as the same float32")
    return want.size


# ---- the reader checked on forms the writer does not use ------------------
# One table, 8 points, encoded by hand from the rules above in every form;
# each must decode to the same ordinates, and the broken ones must be refused.
SELF_HEAD = ("##TITLE= self-check\n##JCAMP-DX= 4.24\n##DATA TYPE= TEST\n##ORIGIN= x\n"
             "##OWNER= x\n##XUNITS= SECONDS\n##YUNITS= ARBITRARY UNITS\n##XFACTOR= 1\n"
             "##YFACTOR= 0.5\n##FIRSTX= 0\n##LASTX= 7\n##NPOINTS= 8\n##FIRSTY= 500\n"
             "##XYDATA= (X++(Y..Y))\n")
SELF_WANT = [500, 502.5, 502.5, 502.5, 499, -10, -10, 3.5]
SELF_FORMS = {
    "AFFN": "0 1000 1005 1005 1005\n4 998 -20 -20 7",
    "PAC": "0+1000+1005+1005+1005\n4+998-20-20+7",
    "SQZ": "0A000A005A005A005\n4I98b0b0G",
    "SQZ DUP": "0A000A005U\n4I98b0TG",
    "DIF": "0A000N%%p\n4I98j018%K7",        # line 2 opens with the check ordinate 998
    "DIF DUP": "0A000N%Tp\n4I98j018%K7",
}
SELF_BROKEN = {
    "a wrong check ordinate": "0A000N%%p\n4I97j018%K7",
    "a wrong line X": "0 1000 1005 1005 1005\n5 998 -20 -20 7",
    "a missing point": "0 1000 1005 1005 1005\n4 998 -20 -20",
    "a stray character": "0 1000 1005 1005 1005\n4 998 -20 -20 7 !",
}


def self_check():
    for name, body in SELF_FORMS.items():
        labels, data = read_file_text(SELF_HEAD + body + "\n##END=\n")
        if not numpy.array_equal(data["y"], SELF_WANT):
            fail("self-check: %s decodes to %s" % (name, list(data["y"])))
    for name, body in SELF_BROKEN.items():
        try:
            read_file_text(SELF_HEAD + body + "\n##END=\n")
            fail("self-check: %s was not refused" % name)
        except JcampError:
            pass
    try:
        head = SELF_HEAD.replace("##FIRSTY= 500\n", "")
        read_file_text(head + SELF_FORMS["AFFN"] + "\n##END=\n")
        fail("self-check: a missing ##FIRSTY= was not refused")
    except JcampError:
        pass
    return len(SELF_FORMS) + len(SELF_BROKEN) + 1


def read_file_text(text):
    labels, _ = split_block(records(text))
    require(labels, CORE + ["END"], "core")
    return labels, read_xydata(labels, "self-check")


def main():
    cases = self_check()
    if not os.path.exists(EXPECTED):
        print("FAIL: %s is missing; run test_export first" % EXPECTED)
        return 1
    with open(EXPECTED) as f:
        exp = json.load(f)
    worst, done = 0.0, []
    for key, check in [("fid", check_fid), ("zero_fid", check_fid),
                       ("spectrum", check_spectrum), ("csv", check_csv)]:
        if key not in exp:
            fail("expected.json has no %s" % key)
            continue
        try:
            result = check(exp[key])
            if key != "csv":
                worst = max(worst, result)
            done.append(exp[key]["file"])
        except (JcampError, OSError, ValueError, KeyError) as e:
            fail("%s: %s" % (exp[key].get("file", key), e))
    if failures:
        return 1
    print("jcamp_read: %d files agree (%s); largest value error %.2g of full scale; "
          "%d self-checks of the reader" % (len(done), ", ".join(done), worst, cases))
    return 0


if __name__ == "__main__":
    sys.exit(main())
