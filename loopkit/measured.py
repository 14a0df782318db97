"""Measured frequency responses: read and write bench CSV files.

A bench frequency-response analyser writes one row per frequency: frequency, then gain and
phase (dB or linear; degrees or radians) or the real and imaginary parts.  Separators vary
(comma, semicolon, tab), a semicolon file may use a decimal comma, and the header names vary
("Frequency (Hz)", "freq[kHz]", "Gain dB", "Mag(dB)", "Phase [rad]", "Re", "Im").
:func:`read_measurement` guesses the columns from the header's names and units and refuses
what it cannot read for sure, naming the file, the line and the token; where the guess is
ambiguous the caller maps the columns (``columns={"f_hz": 0, "gain_db": 2, "phase_deg": 3}``).

What is done with a measurement (margins, the difference to a corner's prediction, the fit of
the stage parameters) is in :mod:`loopkit.measured_fit`.
"""

from __future__ import annotations

import csv
import os
import re
from dataclasses import dataclass

import numpy as np

from .errors import DesignError, DesignFileError

__all__ = [
    "COLUMN_KEYS",
    "KINDS",
    "LAYOUTS",
    "MAX_FILE_BYTES",
    "MIN_POINTS",
    "Layout",
    "Measurement",
    "format_measurement",
    "parse_columns",
    "read_measurement",
    "write_measurement",
]

#: What a measurement is of: the loop gain T, the control-to-output plant, the compensator network.
KINDS = ("loop", "plant", "compensator")
#: Largest file read, bytes (a sweep of 100 000 points in five columns fits well below it).
MAX_FILE_BYTES = 8 * 2**20
#: Fewest points a sweep must have (five points cannot locate a resonance; common practice, no source).
MIN_POINTS = 5
#: Column roles a mapping may name, with the scale to SI (frequency) or the form of the value.
COLUMN_KEYS = ("f_hz", "f_khz", "f_mhz", "gain_db", "gain_lin", "phase_deg", "phase_rad", "re", "im")
_F_SCALE = {"f_hz": 1.0, "f_khz": 1e3, "f_mhz": 1e6}


@dataclass(frozen=True, eq=False)
class Measurement:
    """A measured frequency response.

    Attributes
    ----------
    f_hz : ndarray (n,)
        Frequencies, Hz, strictly increasing.
    response : ndarray of complex (n,)
        The measured response (loop gain T in the 1 + T convention, the control-to-output
        plant in V/V, or the compensator in V/V).
    kind : str
        One of :data:`KINDS`.
    source : str
        File it was read from ("" when made in memory).
    """

    f_hz: np.ndarray
    response: np.ndarray
    kind: str = "loop"
    source: str = ""

    def __post_init__(self):
        if self.kind not in KINDS:
            raise DesignError("kind", self.kind, f"must be one of {', '.join(KINDS)}")
        f = np.asarray(self.f_hz, float)
        h = np.asarray(self.response, complex)
        if f.ndim != 1 or h.shape != f.shape or f.size < MIN_POINTS:
            raise DesignError("f_hz", f"{f.size} frequencies, {h.size} values",
                              f"needs one value per frequency and at least {MIN_POINTS} frequencies")
        if not (np.all(np.isfinite(f)) and f[0] > 0 and np.all(np.diff(f) > 0)):
            raise DesignError("f_hz", f"{f[0]:g} .. {f[-1]:g}", "must be positive, finite and strictly increasing")
        if not np.all(np.isfinite(h) & (np.abs(h) > 0)):
            raise DesignError("response", "zero or not finite", "every value must be finite and nonzero")
        object.__setattr__(self, "f_hz", f)
        object.__setattr__(self, "response", h)

    @property
    def f_range_hz(self) -> tuple[float, float]:
        """(lowest, highest) measured frequency, Hz."""
        return float(self.f_hz[0]), float(self.f_hz[-1])

    @property
    def mag_db(self) -> np.ndarray:
        return 20.0 * np.log10(np.abs(self.response))

    @property
    def phase_deg(self) -> np.ndarray:
        """Unwrapped phase, deg, its first point in (-180, 180]."""
        return np.degrees(np.unwrap(np.angle(self.response)))


@dataclass(frozen=True)
class Layout:
    """How a file is laid out: separator, decimal mark, frequency unit, value form, header names."""

    sep: str
    decimal: str
    f_key: str
    form: tuple[str, str]
    header: tuple[str, str, str]


#: The layouts :func:`write_measurement` writes (each one :func:`read_measurement` reads back).
LAYOUTS = {
    "comma-hz-db-deg": Layout(",", ".", "f_hz", ("gain_db", "phase_deg"), ("Frequency (Hz)", "Gain (dB)", "Phase (deg)")),
    "semicolon-khz-db-deg": Layout(";", ",", "f_khz", ("gain_db", "phase_deg"), ("freq[kHz]", "Mag(dB)", "Phase(deg)")),
    "tab-hz-linear-rad": Layout("\t", ".", "f_hz", ("gain_lin", "phase_rad"), ("Frequency/Hz", "Gain (V/V)", "Phase [rad]")),
    "comma-mhz-re-im": Layout(",", ".", "f_mhz", ("re", "im"), ("Freq (MHz)", "Re", "Im")),
    "tab-khz-re-im": Layout("\t", ".", "f_khz", ("re", "im"), ("f [kHz]", "Real", "Imag")),
}


def _unit_of(name: str) -> str:
    """The unit text of a header: inside () or [] or after '/', or a trailing unit word."""
    m = re.search(r"[(\[]\s*([^)\]]*)\s*[)\]]", name) or re.search(r"/\s*([a-z°]+)\s*$", name)
    if m:
        return m.group(1).strip()
    m = re.search(r"(?:^|[\s_])(hz|khz|mhz|db|deg|degrees|rad|radians|°|v/v|lin|linear)$", name)
    return m.group(1) if m else ""


def _role(name: str) -> tuple[str, str] | None:
    """(role, key or "?") guessed from one header name; None if it is no known column."""
    low = name.strip().strip('"').lower()
    unit = _unit_of(low)
    word = re.sub(r"[(\[].*|/.*", "", low).strip()
    if "margin" in low:
        return None
    if re.match(r"^(f|freq|frequency)\b|^f_|^freq", word):
        key = {"hz": "f_hz", "khz": "f_khz", "mhz": "f_mhz", "": "f_hz"}.get(unit or next(
            (u for u in ("khz", "mhz", "hz") if u in word), ""), "?")
        return "f", key
    if re.match(r"^(re|real)\b|^re\(|^real", word) or low.startswith("re("):
        return "re", "re"
    if re.match(r"^(im|imag|imaginary)\b|^im\(|^imag", word) or low.startswith("im("):
        return "im", "im"
    if re.search(r"gain|mag|ampl|\|[a-z]\|", word):
        if "db" in unit or "db" in word:
            return "gain", "gain_db"
        if unit in ("v/v", "lin", "linear", "ratio", "x", "abs"):
            return "gain", "gain_lin"
        return "gain", "?"
    if re.search(r"phase|arg|angle", word):
        if unit.startswith("rad") or "rad" in word:
            return "phase", "phase_rad"
        if unit.startswith("deg") or unit == "°" or "deg" in word:
            return "phase", "phase_deg"
        return "phase", "?"
    return None


def parse_columns(text: str) -> dict:
    """A column mapping from its command-line form, e.g. ``"f_khz=0,gain_db=2,phase_deg=3"``.

    Values are 0-based column numbers or header names.
    """
    out = {}
    for item in filter(None, (p.strip() for p in str(text).split(","))):
        key, eq, value = item.partition("=")
        key = key.strip()
        if not eq or key not in COLUMN_KEYS + ("f",):
            raise DesignError("--columns", item, f"must be KEY=COLUMN with KEY one of {', '.join(COLUMN_KEYS)}")
        value = value.strip()
        out[key] = int(value) if value.isdigit() else value
    return out


def _guess(file: str, line_no: int, header: list[str], columns: dict | None) -> dict:
    """key -> column index for the frequency and the two value columns."""
    if columns:
        found = {}
        for key, col in columns.items():
            if key not in COLUMN_KEYS + ("f",):
                raise DesignFileError(file, "columns", key, f"must be one of {', '.join(COLUMN_KEYS)}")
            if isinstance(col, str):
                names = [h.strip().strip('"') for h in header]
                if col not in names:
                    raise DesignFileError(file, f"columns.{key}", col, f"no such column in line {line_no}")
                col = names.index(col)
            if not (isinstance(col, int) and 0 <= col < max(len(header), 1)):
                raise DesignFileError(file, f"columns.{key}", col, f"must be a column from 0 to {len(header) - 1}")
            if key == "f":  # the unit from the column's name (Hz when it states none)
                role = _role(header[col])
                key = role[1] if role and role[0] == "f" and role[1] != "?" else "f_hz"
            found[key] = col
    else:
        roles: dict[str, list[tuple[int, str]]] = {}
        for i, name in enumerate(header):
            r = _role(name)
            if r is not None:
                roles.setdefault(r[0], []).append((i, r[1]))
        hint = 'e.g. --columns f_hz=0,gain_db=1,phase_deg=2 (keys: ' + ", ".join(COLUMN_KEYS) + ")"
        pick = ["f"] + (["gain", "phase"] if "gain" in roles and "phase" in roles else ["re", "im"])
        found = {}
        for role in pick:
            hits = roles.get(role, [])
            if len(hits) != 1:
                what = "no" if not hits else "more than one"
                raise DesignFileError(file, f"line {line_no}", "|".join(h.strip() for h in header),
                                      f"{what} {role} column in the header: map the columns, {hint}")
            i, key = hits[0]
            if key == "?":
                raise DesignFileError(file, f"line {line_no}", header[i].strip(),
                                      f"the unit of this {role} column is not stated: map the columns, {hint}")
            found[key] = i
    f_keys = [k for k in found if k in _F_SCALE]
    pairs = [("gain_db", "phase_deg"), ("gain_db", "phase_rad"), ("gain_lin", "phase_deg"),
             ("gain_lin", "phase_rad"), ("re", "im")]
    values = [p for p in pairs if p[0] in found and p[1] in found]
    if len(f_keys) != 1 or len(values) != 1 or len(found) != 3:
        raise DesignFileError(file, "columns", ", ".join(sorted(found)),
                              "needs one frequency column (f_hz, f_khz or f_mhz) and gain and phase"
                              " (gain_db or gain_lin, phase_deg or phase_rad) or re and im")
    return found


def _split(line: str, sep: str | None) -> list[str]:
    """Fields of one line (quoted fields may hold the separator); trailing empty fields dropped."""
    fields = next(csv.reader([line], delimiter=sep, skipinitialspace=True)) if sep else line.split()
    fields = [t.strip().strip('"') for t in fields]
    while fields and not fields[-1]:
        fields.pop()
    return fields


def _sep_of(line: str) -> str | None:
    return "\t" if "\t" in line else ";" if ";" in line else "," if "," in line else None


def _header_index(lines: list) -> int:
    """Index of the header among the first lines: the first with a frequency column and gain and
    phase or real and imaginary columns (lines before it are an instrument's preamble); 0 if none."""
    for i, (_, ln) in enumerate(lines[:50]):
        roles = {(_role(t) or ("",))[0] for t in _split(ln, _sep_of(ln))}
        if "f" in roles and ({"gain", "phase"} <= roles or {"re", "im"} <= roles):
            return i
    return 0


def _number(token: str, decimal: str, file: str, line_no: int, column: str) -> float:
    text = token.replace(",", ".") if decimal == "," else token
    try:
        value = float(text)
    except ValueError:
        raise DesignFileError(file, f"line {line_no}", token or "(empty)", f"column {column}: not a number") from None
    if not np.isfinite(value):
        raise DesignFileError(file, f"line {line_no}", token, f"column {column}: must be a finite number")
    return value


def read_measurement(path, kind: str = "loop", columns: dict | None = None) -> Measurement:
    """Read a measured response from a CSV file.

    Parameters
    ----------
    path : str or path-like
    kind : str
        One of :data:`KINDS`.
    columns : dict, optional
        Column mapping, key (one of :data:`COLUMN_KEYS`, or ``"f"``: frequency in the unit its
        header names, Hz if none) -> 0-based column number or header name; without it the
        columns are guessed from the header.

    Returns
    -------
    Measurement

    Raises
    ------
    DesignFileError
        Naming the file, the line and the token: file above :data:`MAX_FILE_BYTES`, no header
        or an ambiguous one (without ``columns``), a truncated row, text in a number, a
        frequency that is not positive, repeated or out of order, a zero magnitude, fewer than
        :data:`MIN_POINTS` rows.

    Notes
    -----
    Lines starting with ``#`` or ``!`` and blank lines are skipped, and so are the lines before
    the header (an instrument's preamble): the header is the first line with a frequency column.
    The separator is the header's tab, semicolon or comma (else white space); with a tab or
    semicolon separator a decimal comma is read.  A sweep written from high to low frequency is reversed.
    """
    file = os.fspath(path)
    if kind not in KINDS:
        raise DesignError("kind", kind, f"must be one of {', '.join(KINDS)}")
    size = os.path.getsize(file)
    if size > MAX_FILE_BYTES:
        raise DesignFileError(file, "size", f"{size} bytes", f"at most {MAX_FILE_BYTES} bytes ({MAX_FILE_BYTES // 2**20} MiB)")
    with open(file, "rb") as fh:
        raw = fh.read()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        text = raw.decode("latin-1")
    lines = [(i + 1, ln.rstrip("\r\n")) for i, ln in enumerate(text.splitlines())]
    lines = [(i, ln) for i, ln in lines if ln.strip() and not ln.lstrip().startswith(("#", "!"))]
    if not lines:
        raise DesignFileError(file, "line 1", "(empty)", "no data: expected a header line and one row per frequency")
    lines = lines[_header_index(lines):]
    first_no, first = lines[0]
    sep = _sep_of(first)
    header = _split(first, sep)
    has_header = not all(re.fullmatch(r"[-+0-9.,eE]+", t or "x") for t in header)
    if not has_header and not columns:
        raise DesignFileError(file, f"line {first_no}", first.strip()[:40],
                              "no header line: map the columns, e.g. --columns f_hz=0,gain_db=1,phase_deg=2")
    cols = _guess(file, first_no, header, columns)
    rows = lines[1:] if has_header else lines
    decimal = "," if sep in ("\t", ";", None) else "."
    needed = max(cols.values()) + 1
    width = len(header)
    names = {i: (header[i] if has_header else f"#{i}") for i in range(width)}
    f_key = next(k for k in cols if k in _F_SCALE)
    a_key, b_key = [k for k in cols if k not in _F_SCALE]
    f, a, b, where = [], [], [], []
    for line_no, ln in rows:
        tokens = _split(ln, sep)
        if len(tokens) < max(needed, width if has_header else needed):
            raise DesignFileError(file, f"line {line_no}", ln.strip()[:60],
                                  f"truncated row: {len(tokens)} fields, the header has {width}")
        f.append(_number(tokens[cols[f_key]], decimal, file, line_no, names[cols[f_key]]))
        a.append(_number(tokens[cols[a_key]], decimal, file, line_no, names[cols[a_key]]))
        b.append(_number(tokens[cols[b_key]], decimal, file, line_no, names[cols[b_key]]))
        where.append((line_no, tokens[cols[f_key]]))
    if len(f) < MIN_POINTS:
        raise DesignFileError(file, "rows", len(f), f"a sweep needs at least {MIN_POINTS} frequencies")
    f_hz = np.asarray(f) * _F_SCALE[f_key]
    a, b = np.asarray(a), np.asarray(b)
    for k in np.nonzero(f_hz <= 0)[0][:1]:
        raise DesignFileError(file, f"line {where[k][0]}", where[k][1], "frequency must be > 0")
    if f_hz.size > 1 and f_hz[-1] < f_hz[0]:  # a downward sweep
        f_hz, a, b, where = f_hz[::-1], a[::-1], b[::-1], where[::-1]
    step = np.diff(f_hz)
    for k in np.nonzero(step <= 0)[0][:1]:
        (l0, t0), (l1, t1) = where[k], where[k + 1]
        what = "repeats" if step[k] == 0 else "is out of order after"
        raise DesignFileError(file, f"line {l1}", t1, f"frequency {what} {t0} (line {l0}): a sweep must be monotonic")
    response = _to_complex(a_key, b_key, a, b)
    zero = np.nonzero(~(np.abs(response) > 0))[0]
    if zero.size:
        raise DesignFileError(file, f"line {where[zero[0]][0]}", "0", "magnitude must be > 0")
    return Measurement(f_hz, response, kind, file)


def _to_complex(a_key: str, b_key: str, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    if a_key == "re":
        return a + 1j * b
    mag = 10.0 ** (a / 20.0) if a_key == "gain_db" else a
    phase = np.radians(b) if b_key == "phase_deg" else b
    return mag * np.exp(1j * phase)


def format_measurement(m: Measurement, layout: str = "comma-hz-db-deg", comment: str = "") -> str:
    """The text of a measurement in one of :data:`LAYOUTS` (``comment`` lines lead with ``#``)."""
    if layout not in LAYOUTS:
        raise DesignError("layout", layout, f"must be one of {', '.join(LAYOUTS)}")
    lay = LAYOUTS[layout]
    f = m.f_hz / _F_SCALE[lay.f_key]
    if lay.form == ("re", "im"):
        a, b = m.response.real, m.response.imag
    else:
        a = m.mag_db if lay.form[0] == "gain_db" else np.abs(m.response)
        b = m.phase_deg if lay.form[1] == "phase_deg" else np.radians(m.phase_deg)
    out = [f"# {c}" for c in comment.splitlines()] + [lay.sep.join(lay.header)]
    for row in zip(f, a, b):
        cells = [format(float(x), ".12g") for x in row]
        out.append(lay.sep.join(c.replace(".", ",") if lay.decimal == "," else c for c in cells))
    return "\n".join(out) + "\n"


def write_measurement(m: Measurement, path, layout: str = "comma-hz-db-deg", comment: str = "") -> None:
    """Write ``m`` to ``path`` in one of :data:`LAYOUTS` (for round trips and examples)."""
    from .atomicfile import write_text_atomic

    write_text_atomic(path, format_measurement(m, layout, comment))
