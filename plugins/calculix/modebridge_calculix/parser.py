"""Readers for CalculiX 2.20 eigen-results: the ``.dat`` tables and the ``.frd`` mode shapes.

Units are whatever the deck used: eigenvalues in (rad/time)², frequencies in cycles/time
(Hz when time is s), coordinates and displacements in the deck's length unit (the modes are
mass-normalised by CalculiX), effective masses in the deck's mass unit (rotational entries
in mass·length², about the global origin).

When a file holds several frequency steps, both readers return the **last** one.

Format facts this module relies on (checked on ccx 2.20 output):

* ``.frd`` ASCII records are fixed width: nodes ``' -1'`` + I10 + 3·E12.5 (the ``2C`` header's
  format flag is ``1``; ccx 2.20 writes this long form for any node count, checked up to
  1.1e5 nodes and 7-digit ids); results ``' -1'`` + I10 + n·E12.5. Blocks end with ``' -3'``,
  the file with ``' 9999'``.
* ``*NODE OUTPUT`` gives a binary ``.frd``: text header lines, ``2C`` flag ``3`` (node record =
  int32 id + 3 float64), ``3C`` flag ``2`` (element = 4 int32 + int32 node list), ``100CL``
  flag ``2`` (result record = int32 id + float32 per stored component); binary blocks have no
  ``' -3'`` line. The deck asks for the binary file by default (the ``frd_format`` option):
  each block is read with ``readinto`` in 256 kB chunks and cast with numpy, no loop over nodes,
  into a contiguous (modes, n, 3) float64 array.
* The ``100CL`` line carries the frequency (cycles/time) in columns 13–24, printed as E12.5 below
  1 and as a 12-character fixed-point number above, so it is read by column. ``1PMODE`` carries
  the mode number (restarting in every step), ``1PSTEP`` the step number (third integer) and
  the ``100CL`` analysis type (columns 57–58) is 2 for frequency output.
"""

from __future__ import annotations

import io
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import IO, Iterable

import numpy as np

from bridge.errors import ResultParseError

__all__ = [
    "DatResult",
    "FrdResult",
    "read_dat",
    "read_dat_file",
    "read_frd",
    "read_results",
]


# --------------------------------------------------------------------------------------------
# result containers
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True, eq=False)
class DatResult:
    """Tables of one frequency step of a ``.dat`` file (arrays are read-only).

    ``eigenvalues`` in (rad/time)² exactly as printed (negative for some rigid-body modes),
    ``frequencies`` in cycles/time (ccx prints 0 when the eigenvalue is negative),
    ``participation`` and ``effective_mass`` of shape (n, 6) with columns x, y, z, x-rot,
    y-rot, z-rot, ``total_effective_mass`` of shape (6,); the last three are None when the
    file lacks the table.
    """

    mode_numbers: np.ndarray
    eigenvalues: np.ndarray
    frequencies: np.ndarray
    participation: np.ndarray | None
    effective_mass: np.ndarray | None
    total_effective_mass: np.ndarray | None

    def __post_init__(self) -> None:
        _freeze(self)


@dataclass(frozen=True, eq=False)
class FrdResult:
    """Mode shapes of one frequency step of a ``.frd`` file (arrays are read-only).

    ``node_ids`` (int64) and ``coordinates`` (n, 3) in the order of the file's node block,
    ``mode_numbers`` (int64), ``frequencies`` in cycles/time from the mode headers,
    ``displacements`` (n_modes, n_nodes, 3) float64 mapped onto ``node_ids`` by id (NaN for a
    node that a mode block does not list).
    """

    node_ids: np.ndarray
    coordinates: np.ndarray
    mode_numbers: np.ndarray
    frequencies: np.ndarray
    displacements: np.ndarray

    def __post_init__(self) -> None:
        _freeze(self)


def _freeze(obj: object) -> None:
    for value in vars(obj).values():
        if isinstance(value, np.ndarray):
            value.setflags(write=False)


# --------------------------------------------------------------------------------------------
# .dat
# --------------------------------------------------------------------------------------------

_DAT_SECTIONS = {
    "EIGENVALUEOUTPUT": "eigen",
    "PARTICIPATIONFACTORS": "participation",
    "EFFECTIVEMODALMASS": "effective",
    "TOTALEFFECTIVEMASS": "total",
}


def read_dat_file(path: str | Path) -> DatResult:
    """Read the last frequency step of a CalculiX ``.dat`` file (see :func:`read_dat`)."""
    path = Path(path)
    try:
        with open(path, "r", encoding="latin-1", newline=None) as stream:
            return read_dat(stream, path=path)
    except OSError as exc:
        raise ResultParseError(f"cannot read .dat file: {exc}", path=path) from exc


def read_dat(stream: IO[str] | IO[bytes] | Iterable[str], path: str | Path | None = None) -> DatResult:
    """Parse a CalculiX ``.dat`` text stream; return the last frequency step's tables.

    Each ``EIGENVALUE OUTPUT`` heading starts a new step; the participation factor, effective
    modal mass and total effective mass tables that follow belong to it. Units: see
    :class:`DatResult`. Raises :class:`ResultParseError` for an empty stream, a stream without
    an eigenvalue table, or a malformed or inconsistent table.
    """
    steps: list[dict] = []
    section: str | None = None
    rows: list | None = None
    heading: list[str] = []
    heading_line = 0
    saw_text = False
    for lineno, raw in enumerate(stream, start=1):
        line = raw.decode("latin-1") if isinstance(raw, bytes) else raw
        stripped = line.strip()
        if not stripped:
            if rows:  # a blank line closes a table that has rows
                section, rows = None, None
            continue
        saw_text = True
        key = stripped.replace(" ", "")
        if key in _DAT_SECTIONS:
            section = _DAT_SECTIONS[key]
            if section == "eigen":
                steps.append({"eigen_line": lineno})
            elif not steps:
                raise ResultParseError(f"no eigenvalue table (EIGENVALUE OUTPUT) before the "
                                       f"{stripped!r} table", path=path, line=lineno)
            if section in steps[-1] and section != "eigen":
                raise ResultParseError(f"second {stripped!r} table in one step",
                                       path=path, line=lineno)
            rows = []
            steps[-1][section] = rows
            heading, heading_line = [], lineno
            continue
        if section is None:
            continue  # other output (*NODE PRINT etc.)
        tokens = stripped.split()
        if not _is_number(tokens[-1]):
            if rows:  # a text line right after the rows: the table has ended
                section, rows = None, None
                continue
            heading.append(stripped)
            continue  # column headings
        if not rows:  # the first row: the headings must say what the columns are
            _check_heading(section, heading, path, heading_line)
        rows.append(_dat_row(section, tokens, path, lineno))
    if not saw_text:
        raise ResultParseError("the .dat file is empty", path=path)
    if not steps:
        raise ResultParseError("no eigenvalue table (EIGENVALUE OUTPUT) in the .dat file; "
                               "was it a *FREQUENCY step that finished?", path=path)
    return _dat_step(steps[-1], path)


#: words each table's column headings must hold (CalculiX 2.x ``.dat`` layout), checked before
#: the first row is read: a table laid out otherwise is refused rather than misread
_HEADINGS = {
    "eigen": ("MODE NO", "EIGENVALUE", "FREQUENCY", "REAL PART", "IMAGINARY PART", "(RAD/TIME)", "(CYCLES/TIME"),
    "participation": ("MODE NO", "X-COMPONENT", "Y-COMPONENT", "Z-COMPONENT", "X-ROTATION", "Y-ROTATION",
                      "Z-ROTATION"),
    "effective": ("MODE NO", "X-COMPONENT", "Y-COMPONENT", "Z-COMPONENT", "X-ROTATION", "Y-ROTATION", "Z-ROTATION"),
    "total": ("X-COMPONENT", "Y-COMPONENT", "Z-COMPONENT", "X-ROTATION", "Y-ROTATION", "Z-ROTATION"),
}


def _check_heading(section: str, heading: list[str], path, lineno: int) -> None:
    text = " ".join(" ".join(heading).split()).upper()
    if section == "eigen" and "NODAL" in text and "DIAMETER" in text:
        raise ResultParseError("the eigenvalue table is a cyclic-symmetry one (a NODAL DIAMETER column and no "
                               "EIGENVALUE column): modebridge reads plain *FREQUENCY steps only, not cyclic "
                               "symmetry", path=path, line=lineno)
    missing = [w for w in _HEADINGS[section] if w not in text]
    if missing:
        raise ResultParseError(f"the {section} table's column headings lack {', '.join(missing)} "
                               f"(found: {text[:120]!r}); a table laid out otherwise is not read",
                               path=path, line=lineno)


def _is_number(token: str) -> bool:
    try:
        float(token)
    except ValueError:
        return False
    return True


def _dat_row(section: str, tokens: list[str], path, lineno: int):
    """One table row: (mode, values) or values for the total effective mass."""
    expected = {"eigen": 5, "participation": 7, "effective": 7, "total": 6}[section]
    if section == "effective" and tokens[0] == "TOTAL":
        return None  # sum row of the effective modal mass table
    if len(tokens) != expected:
        raise ResultParseError(f"expected {expected} columns in the {section} table, "
                               f"found {len(tokens)}", path=path, line=lineno)
    try:
        if section == "total":
            return [float(t) for t in tokens]
        return int(tokens[0]), [float(t) for t in tokens[1:]]
    except ValueError as exc:
        raise ResultParseError(f"bad number in the {section} table: {exc}",
                               path=path, line=lineno) from None


def _dat_step(step: dict, path) -> DatResult:
    eigen = step["eigen"]
    if not eigen:
        raise ResultParseError("eigenvalue table has no rows", path=path, line=step["eigen_line"])
    modes = np.array([m for m, _ in eigen], dtype=np.int64)
    table = np.array([v for _, v in eigen], dtype=np.float64)
    if modes.tolist() != list(range(1, modes.size + 1)):
        raise ResultParseError(f"the eigenvalue table numbers its modes {modes.tolist()[:8]}…, not 1, 2, 3, …",
                               path=path, line=step["eigen_line"])
    # columns: eigenvalue λ (rad/time)², ω = √λ (rad/time), f = ω/2π (cycles/time), and the
    # imaginary part, which CalculiX fills with √(−λ) for a negative eigenvalue (a rigid-body
    # mode computed slightly below zero). Anything else is not a plain real eigenvalue table.
    lam, om, fr, imag = table[:, 0], table[:, 1], table[:, 2], table[:, 3]
    scale = np.maximum(np.abs(lam), 1e-30)
    neg = lam < 0
    complex_ = (np.abs(imag) > 0) & ((~neg) | (np.abs(om) > 0))
    if np.any(complex_):
        k = int(np.flatnonzero(complex_)[0])
        raise ResultParseError(f"complex frequencies (mode {k + 1}: real part {om[k]:.6g}, imaginary part "
                               f"{imag[k]:.6g} rad/time): a damped or rotating-frame step, which modebridge "
                               "does not read", path=path, line=step["eigen_line"])
    bad = np.abs(np.where(neg, -imag**2, om**2) - lam) > 1e-4 * scale + 1e-12
    bad |= np.abs(om - 2 * np.pi * fr) > 1e-4 * np.maximum(np.abs(om), 1e-30) + 1e-12
    if np.any(bad):
        k = int(np.flatnonzero(bad)[0])
        raise ResultParseError(f"mode {k + 1}: eigenvalue {lam[k]:.7g}, ω {om[k]:.7g} rad/time and f {fr[k]:.7g} "
                               "cycles/time do not agree (λ = ω², ω = 2πf): the columns are not what they seem",
                               path=path, line=step["eigen_line"])

    def modal(name: str) -> np.ndarray | None:
        if name not in step:
            return None
        rows = [r for r in step[name] if r is not None]
        if [m for m, _ in rows] != modes.tolist():
            raise ResultParseError(f"{name} table lists modes {[m for m, _ in rows]}, the "
                                   f"eigenvalue table {modes.tolist()}", path=path)
        return np.array([v for _, v in rows], dtype=np.float64).reshape(len(rows), 6)

    total = None
    if "total" in step:
        if len(step["total"]) != 1:
            raise ResultParseError("total effective mass table must have one row", path=path)
        total = np.array(step["total"][0], dtype=np.float64)
    return DatResult(mode_numbers=modes, eigenvalues=table[:, 0].copy(),
                     frequencies=table[:, 2].copy(), participation=modal("participation"),
                     effective_mass=modal("effective"), total_effective_mass=total)


# --------------------------------------------------------------------------------------------
# .frd: structure scan (shared by the ASCII and binary paths)
# --------------------------------------------------------------------------------------------

_CHUNK_BYTES = 1 << 18          # bytes parsed per vectorised chunk (bounds temporaries)
_SKIP_BYTES = 1 << 16           # bytes searched per read when skipping a block
_ELEMENT_NODES = {1: 8, 2: 6, 3: 4, 4: 20, 5: 15, 6: 10, 7: 3, 8: 6, 9: 4, 10: 8, 11: 2, 12: 3}
_HEADER_STARTS = (b"    1C", b"    1U", b"    1P", b"    2C", b"    3C", b"  100C", b" 9999")


@dataclass
class _Block:
    """Where a node or result data block lies in the file and how it is written."""

    offset: int             # byte offset of the first record
    count: int              # records (nodes) announced by the header
    line: int               # line number of the first record (ASCII), or of its header
    binary: bool
    values: int = 3         # stored values per record
    reclen: int = 0         # bytes per record including the line end (0: irregular ASCII)
    eol: int = 1            # bytes of the line end (1 for \n, 2 for \r\n)
    width: int = 10         # digits of the node number (format flag 1: 10, flag 0: 5)
    mode: int = 0
    step: int = 0
    frequency: float = 0.0


def _file_size(f: IO[bytes]) -> int:
    """Size of the open file in bytes (without moving it: a seek would drop the read buffer)."""
    try:
        return os.fstat(f.fileno()).st_size
    except (AttributeError, OSError, io.UnsupportedOperation):
        here = f.tell()
        size = f.seek(0, io.SEEK_END)
        f.seek(here)
        return size


def _find_line(data: bytes, starts: tuple[bytes, ...], stop: int) -> int:
    """Offset of the first line in data[:stop] (data[0] begins a line) starting with one of
    ``starts``, or -1."""
    best = -1
    for start in starts:
        if data.startswith(start):
            hit = 0
        else:
            hit = data.find(b"\n" + start, 0, stop)
            hit = hit + 1 if hit >= 0 else -1
        if 0 <= hit < stop and (best < 0 or hit < best):
            best = hit
    return best


class _FrdScanner:
    """Walks the header lines of an .frd file and records where its data blocks are."""

    def __init__(self, f: IO[bytes], path: Path):
        self.f = f
        self.path = path
        self.size = _file_size(f)
        self.line = 0
        self.nodes: _Block | None = None
        self.modes: list[_Block] = []

    def error(self, message: str, line: int | None = None) -> ResultParseError:
        return ResultParseError(message, path=self.path, line=self.line if line is None else line)

    def readline(self) -> bytes:
        raw = self.f.readline()
        if raw:
            self.line += 1
        return raw

    def scan(self) -> None:
        step = mode = 0
        first = True
        while True:
            raw = self.readline()
            if not raw:
                if first:
                    raise ResultParseError("the .frd file is empty", path=self.path)
                raise self.error("file ends without the ' 9999' end record (truncated?)")
            first = False
            line = raw.rstrip(b"\r\n")
            if line.startswith(b"    1P"):
                fields = line[6:].split()
                if line.startswith(b"    1PSTEP") and len(fields) >= 4:
                    step = int(fields[3])
                elif line.startswith(b"    1PMODE") and len(fields) >= 2:
                    mode = int(fields[1])
            elif line.startswith(b"    1C") or line.startswith(b"    1U"):
                continue
            elif line.startswith(b"    2C"):
                self._node_block(line)
            elif line.startswith(b"    3C"):
                self._element_block(line)
            elif line.startswith(b"  100C"):
                self._result_block(line, step, mode)
                mode = 0
            elif line.startswith(b" 9999"):
                return
            elif not line.strip():
                continue
            else:
                raise self.error(f"unexpected line {line[:40]!r}")

    # -- header fields ------------------------------------------------------------------

    def _ints(self, line: bytes, what: str) -> list[int]:
        try:
            return [int(x) for x in line[6:].split()]
        except ValueError:
            raise self.error(f"malformed {what} header {line!r}") from None

    def _node_block(self, line: bytes) -> None:
        if self.nodes is not None:
            raise self.error("a second node block (2C) is not supported")
        fields = self._ints(line, "node block")
        if len(fields) < 2:
            raise self.error(f"malformed node block header {line!r}")
        count, flag = fields[0], fields[-1]
        if flag in (0, 1):
            self.nodes = self._ascii_block(count, 3, "node", flag)
        elif flag == 3:
            self.nodes = self._binary_block(count, 4 + 3 * 8, "node")
        else:
            raise self.error(f"node block format flag {flag} is not supported (0/1 ASCII, 3 binary)")

    def _element_block(self, line: bytes) -> None:
        fields = self._ints(line, "element block")
        if len(fields) < 2:
            raise self.error(f"malformed element block header {line!r}")
        count, flag = fields[0], fields[-1]
        if flag in (0, 1):
            self._skip_ascii_block("element")
        elif flag == 2:
            self._skip_binary_elements(count)
        else:
            raise self.error(f"element block format flag {flag} is not supported")

    def _result_block(self, line: bytes, step: int, mode: int) -> None:
        header_line = self.line
        if len(line) < 75:
            raise self.error(f"result header (100CL) too short: {line!r}")
        tail = len(line) - 51  # the fields after the frequency have fixed width 51
        try:
            frequency = float(line[12:tail])
            count = int(line[tail:tail + 12])
            analysis = int(line[tail + 32:tail + 34])
            flag = int(line[tail + 49:tail + 51])
        except ValueError:
            raise self.error(f"malformed result header (100CL) {line!r}") from None
        raw = self.readline()
        if not raw.startswith(b" -4"):
            raise self.error("result header (100CL) not followed by a ' -4' dataset line"
                             if raw else "file ends inside a result header (truncated?)")
        name = raw[5:13].strip()
        try:
            ncomp = int(raw[13:18])
        except ValueError:
            raise self.error(f"malformed dataset line {raw!r}") from None
        stored = 0
        for _ in range(ncomp):
            raw = self.readline()
            if not raw.startswith(b" -5"):
                raise self.error("dataset line ' -4' not followed by its ' -5' component lines"
                                 if raw else "file ends inside a result header (truncated?)")
            iexist = raw[33:38].strip()
            if iexist != b"1":  # iexist = 1: computed by the post-processor, not stored
                stored += 1
        wanted = name == b"DISP" and analysis == 2
        if wanted and stored != 3:
            raise self.error(f"DISP block with {stored} stored components (expected 3)")
        if flag in (0, 1):
            if wanted:
                block = self._ascii_block(count, 3, f"DISP block of mode {mode}", flag)
            else:
                self._skip_ascii_block(name.decode("latin-1") + " block")
                return
        elif flag == 2:
            block = self._binary_block(count, 4 + 4 * stored, name.decode("latin-1") + " block")
        else:
            raise self.error(f"result format flag {flag} is not supported (0/1 ASCII, 2 binary)",
                             line=header_line)
        if wanted:
            block.mode, block.step, block.frequency = mode, step, frequency
            self.modes.append(block)

    # -- data blocks --------------------------------------------------------------------

    def _ascii_block(self, count: int, values: int, what: str, flag: int) -> _Block:
        """Record an ASCII block of ``count`` one-line records; jump over it if regular."""
        start = self.f.tell()
        width = 10 if flag == 1 else 5
        block = _Block(offset=start, count=count, line=self.line + 1, binary=False,
                       values=values, width=width)
        first = self.f.readline()
        body = first.rstrip(b"\r\n")
        reclen = len(first)
        eol = reclen - len(body)
        if count > 0 and first.startswith(b" -1") and eol and len(body) == 3 + width + 12 * values:
            end = start + count * reclen
            self.f.seek(end - 1)
            last_eol = self.f.read(1)
            marker = self.f.readline()
            if last_eol == b"\n" and marker.rstrip(b"\r\n") == b" -3":
                block.reclen, block.eol = reclen, eol
                self.line += count + 1
                return block
        # irregular or truncated: walk it line by line to find its end
        self.f.seek(start)
        self._skip_ascii_block(what)
        return block

    def _skip_ascii_block(self, what: str) -> None:
        """Move past the next ' -3' line, counting lines; error at a header or end of file."""
        f = self.f
        carry = b""                       # incomplete last line of the previous chunk
        while True:
            chunk = f.read(_SKIP_BYTES)
            region = f.tell() - len(chunk) - len(carry)   # file offset of ``data``
            data = carry + chunk if carry else chunk
            if not chunk:
                if data.rstrip(b"\r\n") == b" -3":
                    self.line += 1
                    return
                raise self.error(f"file ends inside the {what} (no ' -3' end record; truncated?)",
                                 line=self.line + (1 if data else 0))
            cut = data.rfind(b"\n") + 1  # data[:cut] holds whole lines, data[0] starts one
            end = _find_line(data, (b" -3\n", b" -3\r\n"), cut)
            header = _find_line(data, (b"  ", b" 9999"), cut)
            if header >= 0 and (end < 0 or header < end):
                raise self.error(f"the {what} has no ' -3' end record before the next header",
                                 line=self.line + data.count(b"\n", 0, header) + 1)
            if end >= 0:
                consumed = data.index(b"\n", end) + 1
                self.line += data.count(b"\n", 0, consumed)
                f.seek(region + consumed)
                return
            self.line += data.count(b"\n", 0, cut)
            carry = data[cut:]

    def _binary_block(self, count: int, reclen: int, what: str) -> _Block:
        start = self.f.tell()
        end = start + count * reclen
        if self.size < end:
            raise self.error(f"file ends inside the binary {what} (truncated?)")
        self.f.seek(end)
        return _Block(offset=start, count=count, line=self.line, binary=True,
                      values=(reclen - 4) // (8 if what == "node" else 4), reclen=reclen)

    def _skip_binary_elements(self, count: int) -> None:
        f = self.f
        start = f.tell()
        head = f.read(16)
        if count == 0:
            f.seek(start)
            return
        if len(head) < 16:
            raise self.error("file ends inside the binary element block (truncated?)")
        etype = int(np.frombuffer(head, "<i4")[1])
        if etype in _ELEMENT_NODES:  # try: all elements of the first element's type
            f.seek(start + count * (16 + 4 * _ELEMENT_NODES[etype]))
            peek = f.read(6)
            f.seek(-len(peek), io.SEEK_CUR)
            if peek in _HEADER_STARTS:
                return
        f.seek(start)
        for _ in range(count):  # mixed element types: walk element by element
            head = f.read(16)
            if len(head) < 16:
                raise self.error("file ends inside the binary element block (truncated?)")
            etype = int(np.frombuffer(head, "<i4")[1])
            if etype not in _ELEMENT_NODES:
                raise self.error(f"unknown element type {etype} in the binary element block")
            f.seek(4 * _ELEMENT_NODES[etype], io.SEEK_CUR)


# --------------------------------------------------------------------------------------------
# .frd: fast readers of one data block
# --------------------------------------------------------------------------------------------

def _exponent_tables() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Factors for mantissa·10^k, indexed by code = 100·(exponent sign is '-') + exponent digits.

    The mantissa is the 6-digit integer of an E12.5 field, so k = ±exponent − 5. For |k| <= 22
    both 10^|k| and the mantissa are exact doubles: value = mantissa · A / B (one of A, B is 1)
    is a single correctly rounded operation, i.e. the same double ``float(text)`` gives.
    """
    code = np.arange(200)
    k = np.where(code >= 100, 100 - code, code) - 5
    exact = 10.0 ** np.clip(np.abs(k), 0, 22)
    return np.where(k >= 0, exact, 1.0), np.where(k < 0, exact, 1.0), np.abs(k) > 22


_SCALE_MUL, _SCALE_DIV, _SCALE_INEXACT = _exponent_tables()
_SIGN = np.full(256, np.nan)
_SIGN[ord(" ")], _SIGN[ord("-")] = 1.0, -1.0
_EXP_SIGN = np.full(256, 10_000, np.intp)     # an invalid sign character gives an invalid code
_EXP_SIGN[ord("+")], _EXP_SIGN[ord("-")] = 0, 100


class _AsciiChunkParser:
    """Vectorised conversion of a uint8 matrix of equal-length ASCII records.

    A record is ' -1', an I``width`` number and ``values`` E12.5 fields. The chunk is
    transposed once so that every character column is a contiguous vector; digits are then
    combined by Horner's rule in integers and scaled exactly (see :func:`_exponent_tables`),
    so the result equals ``float(text)``. The rare fields with |exponent − 5| > 22 are
    converted with ``float``. No BLAS is used (its threads cost more than they gain here).
    """

    def __init__(self, reclen: int, eol: int, values: int):
        self.width = w = reclen - eol - 3 - 12 * values
        self.values = v = values
        self.starts = starts = 3 + w + 12 * np.arange(v)
        mant = (starts[:, None] + np.array([1, 3, 4, 5, 6, 7])).ravel()
        expo = (starts[:, None] + np.array([10, 11])).ravel()
        self.digit_rows = np.concatenate([np.arange(3, 3 + w), mant, expo])
        self.fixed_rows = np.concatenate([[0, 1, 2], starts + 2, starts + 8])
        self.fixed_chars = np.frombuffer(b" -1" + b"." * v + b"E" * v, np.uint8)[:, None]
        self.eol_rows = np.arange(reclen - eol, reclen)
        self.eol_chars = np.frombuffer(b"\r\n"[2 - eol:], np.uint8)[:, None]

    def parse(self, rows: np.ndarray, ids_out: np.ndarray,
              vals_out: np.ndarray) -> np.ndarray | None:
        """Fill ``ids_out`` (n,) and ``vals_out`` (n, values) from the (n, reclen) records.

        Returns the indices of records it could not convert (to be parsed one by one), or None
        if the line ends are not where this layout puts them (the chunk is not regular).
        """
        w, v = self.width, self.values
        cols = np.ascontiguousarray(rows.T)           # (reclen, n): one vector per column
        if not (cols[self.eol_rows] == self.eol_chars).all():
            return None
        ok = (cols[self.fixed_rows] == self.fixed_chars).all(axis=0)
        digits = cols[self.digit_rows]
        digits -= 48                                  # '0'..'9' -> 0..9, others wrap to > 9
        id_digits = digits[:w]
        np.putmask(id_digits, id_digits == 240, 0)    # leading blanks of the right-aligned id
        ok &= digits.max(axis=0) <= 9
        ids_out[:] = _horner(id_digits, np.int64)
        codes = np.empty((v, rows.shape[0]), np.intp)
        for q in range(v):
            code = codes[q]
            code[:] = _horner(digits[w + 6 * v + 2 * q:w + 6 * v + 2 * q + 2], np.intp)
            code += _EXP_SIGN.take(cols[self.starts[q] + 9])
            ok &= code < 200
        np.putmask(codes, codes >= 200, 0)
        signs = _SIGN.take(cols[self.starts])          # NaN for an invalid sign character
        ok &= ~np.isnan(signs).any(axis=0)
        scaled = np.empty((v, rows.shape[0]), np.float64)
        for q in range(v):
            row = scaled[q]
            row[:] = _horner(digits[w + 6 * q:w + 6 * q + 6], np.int32)
            row *= _SCALE_MUL.take(codes[q])
            row /= _SCALE_DIV.take(codes[q])
            row *= signs[q]
            inexact = np.flatnonzero(_SCALE_INEXACT.take(codes[q]) & ok)
            if inexact.size:                          # e.g. 1e-30: let float() round it
                field = rows[inexact, self.starts[q]:self.starts[q] + 13].copy()
                field[:, 12] = 32                     # separator
                row[inexact] = [float(x) for x in field.tobytes().split()]
        vals_out[:] = scaled.T
        return np.flatnonzero(~ok)


def _horner(digits: np.ndarray, dtype) -> np.ndarray:
    """Integer value of the digit rows (most significant first) of a (k, n) digit matrix."""
    acc = digits[0].astype(dtype)
    for row in digits[1:]:
        acc *= 10
        acc += row
    return acc


_E_FIELD = re.compile(r"[ -]?\d\.\d+E[-+](?:\d{3}(?=$|[ -]|\d\.)|\d{2})"
                      r"|[ -]*-?(?:nan|inf)", re.IGNORECASE)


def _parse_ascii_line(raw: bytes, width: int, values: int) -> tuple[int, list[float]]:
    """Slow path for one ASCII record that the vectorised parser refused.

    A record of the regular length is cut into its fixed fields. A longer one (C printf widens a
    negative E12.5 field with a 3-digit exponent to 13 characters) is split into E-format tokens;
    an exponent takes 3 digits only if a field boundary follows.
    """
    body = raw.rstrip(b"\r\n").decode("latin-1")
    if not body.startswith(" -1"):
        raise ValueError(f"expected a ' -1' record, found {body[:30]!r}")
    node = int(body[3:3 + width])
    rest = body[3 + width:]
    if len(rest) == 12 * values:
        return node, [float(rest[12 * j:12 * j + 12]) for j in range(values)]
    fields = [m.group(0) for m in _E_FIELD.finditer(rest)]
    if len(fields) != values or sum(map(len, fields)) != len(rest):
        raise ValueError(f"expected {values} E12.5 values, found {rest!r}")
    return node, [float(x) for x in fields]


class _BlockReader:
    """Reads the records of one data block into caller-supplied arrays, chunk by chunk."""

    def __init__(self, f: IO[bytes], path: Path):
        self.f = f
        self.path = path

    def read(self, block: _Block, what: str, sink) -> None:
        """Call ``sink(row0, ids, values)`` for consecutive chunks of the block."""
        self.f.seek(block.offset)
        if block.binary:
            self._read_binary(block, what, sink)
        elif block.reclen:
            if not self._read_ascii_fast(block, what, sink):
                self.f.seek(block.offset)
                self._read_ascii_slow(block, what, sink)
        else:
            self._read_ascii_slow(block, what, sink)

    def _read_binary(self, block: _Block, what: str, sink) -> None:
        if what == "node":
            dtype = np.dtype([("id", "<i4"), ("v", "<f8", (3,))])
        else:
            dtype = np.dtype([("id", "<i4"), ("v", "<f4", (block.values,))])
        per = max(1, min(block.count, _CHUNK_BYTES // dtype.itemsize))
        buf = np.empty(per, dtype)
        done = 0
        while done < block.count:
            k = min(per, block.count - done)
            got = self.f.readinto(memoryview(buf[:k]).cast("B"))
            if got != k * dtype.itemsize:
                raise ResultParseError(f"file ends inside the binary {what} (truncated?)",
                                       path=self.path, line=block.line)
            sink(done, buf["id"][:k], buf["v"][:k, :3])
            done += k

    def _read_ascii_fast(self, block: _Block, what: str, sink) -> bool:
        parser = _AsciiChunkParser(block.reclen, block.eol, block.values)
        per = max(1, min(block.count, _CHUNK_BYTES // block.reclen))
        buf = np.empty(per * block.reclen, np.uint8)
        ids = np.empty(per, np.int64)
        vals = np.empty((per, block.values), np.float64)
        done = 0
        while done < block.count:
            k = min(per, block.count - done)
            got = self.f.readinto(memoryview(buf[:k * block.reclen]))
            if got != k * block.reclen:
                return False
            rows = buf[:k * block.reclen].reshape(k, block.reclen)
            bad = parser.parse(rows, ids[:k], vals[:k])
            if bad is None:
                return False
            for r in bad:  # e.g. a 3-digit exponent in a 12-character field, or nan
                try:
                    ids[r], vals[r] = _parse_ascii_line(rows[r].tobytes(), block.width,
                                                        block.values)
                except ValueError as exc:
                    raise ResultParseError(f"bad record in the {what}: {exc}", path=self.path,
                                           line=block.line + done + int(r)) from None
            sink(done, ids[:k], vals[:k])
            done += k
        return True

    def _read_ascii_slow(self, block: _Block, what: str, sink) -> None:
        """Line-by-line walk of an irregular block; precise errors with line numbers."""
        line = block.line - 1
        ids, rows = [], []
        while True:
            raw = self.f.readline()
            line += 1
            if not raw:
                raise ResultParseError(f"file ends inside the {what} (no ' -3' end record; "
                                       "truncated?)", path=self.path, line=line - 1)
            if raw.rstrip(b"\r\n") == b" -3":
                break
            if not raw.endswith(b"\n"):
                raise ResultParseError(f"file ends inside a record of the {what} (truncated?)",
                                       path=self.path, line=line)
            try:
                node, values = _parse_ascii_line(raw, block.width, block.values)
            except ValueError as exc:
                raise ResultParseError(f"bad record in the {what}: {exc}", path=self.path,
                                       line=line) from None
            ids.append(node)
            rows.append(values)
        if len(ids) != block.count:
            raise ResultParseError(f"the {what} holds {len(ids)} records, its header announces "
                                   f"{block.count}", path=self.path, line=line)
        if ids:
            sink(0, np.array(ids, np.int64), np.array(rows, np.float64))


# --------------------------------------------------------------------------------------------
# .frd: public reader
# --------------------------------------------------------------------------------------------

def read_frd(path: str | Path) -> FrdResult:
    """Read node coordinates and the last frequency step's mode shapes from a ``.frd`` file.

    ASCII (``*NODE FILE``) and binary (``*NODE OUTPUT``) files are told apart by the format
    flags of their block headers. Element blocks and datasets other than DISP are skipped.
    Units: see :class:`FrdResult`. Raises :class:`ResultParseError` for an empty, truncated or
    malformed file (with the line number where known) or one without frequency DISP output.
    """
    path = Path(path)
    try:
        # a small buffer: the scanner reads header lines and seeks over the data blocks (a seek
        # drops the buffer, so a large one would be read again after every block)
        f = open(path, "rb", buffering=1 << 13)
    except OSError as exc:
        raise ResultParseError(f"cannot read .frd file: {exc}", path=path) from exc
    with f:
        scanner = _FrdScanner(f, path)
        scanner.scan()
        if scanner.nodes is None:
            raise ResultParseError("no node block (2C) in the .frd file", path=path)
        if not scanner.modes:
            raise ResultParseError("no DISP results of a frequency step in the .frd file "
                                   "(*NODE FILE/OUTPUT with U missing?)", path=path)
        last = scanner.modes[-1].step
        modes = [b for b in scanner.modes if b.step == last]
        for i, b in enumerate(modes):
            if b.mode == 0:
                b.mode = i + 1
        return _assemble(f, path, scanner.nodes, modes)


def _assemble(f: IO[bytes], path: Path, nodes: _Block, modes: list[_Block]) -> FrdResult:
    if nodes.binary and all(b.binary and b.values == 3 for b in modes):
        return _assemble_binary(f, path, nodes, modes)
    reader = _BlockReader(f, path)
    n = nodes.count
    node_ids = np.empty(n, np.int64)
    coords = np.empty((n, 3), np.float64)

    def node_sink(r0: int, ids: np.ndarray, vals: np.ndarray) -> None:
        node_ids[r0:r0 + len(ids)] = ids
        coords[r0:r0 + len(ids)] = vals

    reader.read(nodes, "node", node_sink)
    disp = np.full((len(modes), n, 3), np.nan)
    lookup: list = []  # lazily built (sorted ids, order) for blocks in another node order

    for m, block in enumerate(modes):
        target = disp[m]
        by_id = _by_id_sink(target, node_ids, lookup, block, path)

        def sink(r0: int, ids: np.ndarray, vals: np.ndarray, target=target, by_id=by_id) -> None:
            k = len(ids)
            if r0 + k <= n and np.array_equal(ids, node_ids[r0:r0 + k]):
                target[r0:r0 + k] = vals  # the node block's own order: rows as they come
                return
            by_id(r0, ids, vals)

        reader.read(block, f"DISP block of mode {block.mode}", sink)
    return FrdResult(node_ids=node_ids, coordinates=coords,
                     mode_numbers=np.array([b.mode for b in modes], np.int64),
                     frequencies=np.array([b.frequency for b in modes], np.float64),
                     displacements=disp)


#: a binary node record: int32 id and three float64 coordinates, packed (28 bytes); the
#: coordinates as one 24-byte item, so that they are copied without a loop over their bytes
_NODE_RECORD = np.dtype({"names": ["id", "xyz"], "formats": ["<i4", "V24"], "offsets": [0, 4], "itemsize": 28})

#: DISP records read and cast per ``readinto`` in the binary path (16 384 records: 256 kB of
#: file, a buffer that stays in the core's cache between the read and the cast)
_BINARY_CHUNK = 1 << 14


def _assemble_binary(f: IO[bytes], path: Path, nodes: _Block, modes: list[_Block]) -> FrdResult:
    """Binary file: blocks read with ``readinto`` in chunks of :data:`_BINARY_CHUNK` records
    into one reused buffer and converted by numpy views, no Python loop over nodes. A DISP
    record is int32 id + 3 float32: the ids of a chunk are compared with the node block's, and
    its three float32 columns are cast one by one into the contiguous (modes, n, 3) float64
    ``displacements`` (the id column is never converted). A block that lists other nodes, or
    the nodes in another order, goes through the general path (by id).

    Measured on benchmarks/bench_frd_parse.py's files: on 100 modes of 71 003 nodes (117 MB) casting
    the whole (n, 4) record into a (modes, n, 4) float64 array and returning a view took as long
    in isolation (57 against 59 ms CPU, medians of 7) but faults in a third more fresh memory
    (227 MB for 170 MB returned; peak traced 231 against 173 MB), and on this machine a fresh
    page costs more than the cast (170 MB of numpy array: 27 ms to allocate and fill). On 10
    modes of 18 003 nodes the (n, 4) way was the faster in isolation (read + cast of the DISP
    blocks 1.04 against 1.24 ms of CPU, medians of 41), yet in the benchmark's rounds both came
    out at 39-41 % of the raw read by CPU (medians of 21, two runs each, shared machine).
    Casting the strided (n, 3) view in one call runs an inner loop of 3 values: 1.5 against
    1.1 ms there."""
    n = nodes.count
    rec = np.empty(n, _NODE_RECORD)
    _read_exact(f, nodes, rec, path, "node block")
    ids32 = np.ascontiguousarray(rec["id"])
    # the coordinates copied as 24-byte items (bit for bit): 0.10 ms for 18 003 nodes, where
    # copying the (n, 24) uint8 columns took 0.28 ms (the inner loop ran over 24 bytes)
    coords = np.empty((n, 3), np.float64)
    coords.view("V24").reshape(n)[:] = rec["xyz"]
    del rec
    node_ids = ids32.astype(np.int64)
    disp = np.empty((len(modes), n, 3), np.float64)
    buf = np.empty((max(1, min(n, _BINARY_CHUNK)), 4), "<f4")
    reader = None
    lookup: list = []
    for m, block in enumerate(modes):
        target = disp[m]
        if block.count == n and _read_in_order(f, block, buf, ids32, target, path):
            continue
        # another node set or order: by id, NaN for a node the block does not list
        target[:] = np.nan
        reader = reader or _BlockReader(f, path)
        reader.read(block, f"DISP block of mode {block.mode}", _by_id_sink(target, node_ids, lookup, block, path))
    return FrdResult(node_ids=node_ids, coordinates=coords,
                     mode_numbers=np.array([b.mode for b in modes], np.int64),
                     frequencies=np.array([b.frequency for b in modes], np.float64),
                     displacements=disp)


def _read_in_order(f: IO[bytes], block: _Block, buf: np.ndarray, ids32: np.ndarray, target: np.ndarray,
                   path: Path) -> bool:
    """Read a binary DISP block of ``len(ids32)`` records into ``target`` (n, 3) chunk by chunk
    through ``buf`` (k, 4) float32; False (``target`` partly filled) as soon as a chunk lists
    other nodes than ``ids32`` there."""
    n, per = ids32.size, buf.shape[0]
    raw = memoryview(buf).cast("B")
    ids = buf.view("<i4")[:, 0]
    f.seek(block.offset)
    for r0 in range(0, n, per):
        k = min(per, n - r0)
        if f.readinto(raw[:16 * k]) != 16 * k:
            raise ResultParseError(f"file ends inside the binary DISP block of mode {block.mode} (truncated?)",
                                   path=path, line=block.line)
        if not np.array_equal(ids[:k], ids32[r0:r0 + k]):
            return False
        rows = target[r0:r0 + k]
        for j in range(3):
            np.copyto(rows[:, j], buf[:k, j + 1])
    return True


def _read_exact(f: IO[bytes], block: _Block, out: np.ndarray, path: Path, what: str) -> None:
    if out.nbytes == 0:  # an empty block (a model whose nodes all lie outside the elements)
        return
    f.seek(block.offset)
    if f.readinto(memoryview(out).cast("B")) != out.nbytes:
        raise ResultParseError(f"file ends inside the binary {what} (truncated?)", path=path, line=block.line)


def _by_id_sink(target: np.ndarray, node_ids: np.ndarray, lookup: list, block: _Block, path: Path):
    """A sink that puts records into ``target`` rows by node id (``lookup``: filled once)."""
    n = node_ids.size

    def sink(r0: int, ids: np.ndarray, vals: np.ndarray) -> None:
        if not lookup:
            order = np.argsort(node_ids, kind="stable")
            lookup.extend([node_ids[order], order])
        sorted_ids, order = lookup
        pos = np.searchsorted(sorted_ids, ids)
        pos[pos >= n] = 0
        found = sorted_ids[pos] == ids
        if not found.all():
            raise ResultParseError(f"DISP block of mode {block.mode} lists node "
                                   f"{int(ids[~found][0])}, which is not in the node block",
                                   path=path, line=block.line)
        target[order[pos]] = vals
    return sink


# --------------------------------------------------------------------------------------------
# .frd: plain reference reader (test oracle, benchmark baseline)
# --------------------------------------------------------------------------------------------

def _read_frd_lines(path: str | Path) -> FrdResult:
    """Deliberately plain line-by-line reader of an ASCII ``.frd`` (same result as read_frd).

    Kept simple and independent of the fast reader: it is the oracle of the tests and the
    baseline of the benchmark. Binary files are rejected.
    """
    path = Path(path)
    node_ids: list[int] = []
    coords: list[list[float]] = []
    modes: list[dict] = []
    state = None          # "nodes", "elements", "disp", "skip"
    step = mode = 0
    width = 10
    current = None
    seen_end = False
    lineno = 0
    with open(path, "r", encoding="latin-1") as f:
        for lineno, line in enumerate(f, start=1):
            line = line.rstrip("\r\n")
            if state == "header":            # ' -4' / ' -5' lines of a result block
                if line.startswith(" -4"):
                    is_disp = line[5:13].strip() == "DISP" and current["analysis"] == 2
                    if is_disp:
                        modes.append(current)
                    continue
                if line.startswith(" -5"):
                    continue
                state = "disp" if is_disp else "skip"
            if state is not None:            # inside a data block
                if line == " -3":
                    state = None
                elif not (line.startswith(" -1") or line.startswith(" -2")):
                    raise ResultParseError(f"unexpected line in a {state} block (no ' -3'?)",
                                           path=path, line=lineno)
                elif state in ("nodes", "disp") and line.startswith(" -1"):
                    try:
                        number = int(line[3:3 + width])
                        values = [float(line[3 + width + 12 * j:3 + width + 12 * (j + 1)])
                                  for j in range(3)]
                    except ValueError as exc:
                        raise ResultParseError(f"bad record: {exc}", path=path,
                                               line=lineno) from None
                    if state == "nodes":
                        node_ids.append(number)
                        coords.append(values)
                    else:
                        current["values"][number] = values
                continue
            if line.startswith("    2C"):
                flag = line.split()[-1]
                if flag not in ("0", "1"):
                    raise ResultParseError("binary .frd: the line reader reads ASCII only",
                                           path=path, line=lineno)
                width = 10 if flag == "1" else 5
                state = "nodes"
            elif line.startswith("    3C"):
                state = "elements"
            elif line.startswith("    1PSTEP"):
                step = int(line.split()[3])
            elif line.startswith("    1PMODE"):
                mode = int(line.split()[1])
            elif line.startswith("  100C"):
                current = {"step": step, "mode": mode, "frequency": float(line[12:24]),
                           "analysis": int(line[56:58]), "values": {}}
                state, is_disp, mode = "header", False, 0
            elif line.startswith(" 9999"):
                seen_end = True
                break
    if lineno == 0:
        raise ResultParseError("the .frd file is empty", path=path)
    if state is not None:
        raise ResultParseError("file ends inside a block (truncated?)", path=path, line=lineno)
    if not seen_end:
        raise ResultParseError("file ends without the ' 9999' end record (truncated?)",
                               path=path, line=lineno)
    if not modes:
        raise ResultParseError("no DISP results of a frequency step", path=path)
    last = modes[-1]["step"]
    modes = [m for m in modes if m["step"] == last]
    disp = np.full((len(modes), len(node_ids), 3), np.nan)
    for m, block in enumerate(modes):
        for i, number in enumerate(node_ids):
            if number in block["values"]:
                disp[m, i] = block["values"][number]
    return FrdResult(node_ids=np.array(node_ids, np.int64),
                     coordinates=np.array(coords, np.float64).reshape(-1, 3),
                     mode_numbers=np.array([m["mode"] or i + 1 for i, m in enumerate(modes)],
                                           np.int64),
                     frequencies=np.array([m["frequency"] for m in modes], np.float64),
                     displacements=disp)


# --------------------------------------------------------------------------------------------
# both
# --------------------------------------------------------------------------------------------

def read_results(workdir: str | Path, jobname: str) -> tuple[DatResult, FrdResult]:
    """Read ``JOB.dat`` and ``JOB.frd`` of a finished frequency run in ``workdir``.

    Raises :class:`ResultParseError` if either file is unusable or if they disagree on the
    mode numbers.
    """
    workdir = Path(workdir)
    dat = read_dat_file(workdir / f"{jobname}.dat")
    frd = read_frd(workdir / f"{jobname}.frd")
    if not np.array_equal(dat.mode_numbers, frd.mode_numbers):
        raise ResultParseError(f"the .dat lists modes {dat.mode_numbers.tolist()}, the .frd "
                               f"{frd.mode_numbers.tolist()}", path=workdir / f"{jobname}.frd")
    return dat, frd


# --------------------------------------------------------------------------------------------
# .dat: *NODE PRINT displacement blocks (nodes outside the elements: reference points)
# --------------------------------------------------------------------------------------------

def read_node_print(path: str | Path, set_name: str) -> tuple[np.ndarray, np.ndarray]:
    """Displacements printed by ``*NODE PRINT, NSET=set_name`` (U) in a ``.dat`` file: one block
    per mode, in order. Returns node ids (n,) and displacements (blocks, n, 3).

    CalculiX writes no ``.frd`` results for nodes that only mass, spring or rigid-body
    definitions use (measured with 2.20), so the reference points come from here (six significant
    digits, the .dat format)."""
    path = Path(path)
    head = f"displacements (vx,vy,vz) for set {set_name.upper()} and time"
    blocks: list[list[tuple[int, float, float, float]]] = []
    rows: list | None = None
    try:
        text = path.read_text(encoding="latin-1")
    except OSError as exc:
        raise ResultParseError(f"cannot read .dat file: {exc}", path=path) from exc
    for lineno, line in enumerate(text.splitlines(), start=1):
        s = line.strip()
        if s.startswith(head):
            rows = []
            blocks.append(rows)
            continue
        if rows is None:
            continue
        if not s:
            if rows:
                rows = None
            continue
        tokens = s.split()
        try:
            rows.append((int(tokens[0]), float(tokens[1]), float(tokens[2]), float(tokens[3])))
        except (ValueError, IndexError):
            raise ResultParseError(f"malformed line in the displacements of set {set_name}",
                                   path=path, line=lineno) from None
    if not blocks or not blocks[0]:
        raise ResultParseError(f"no printed displacements of set {set_name} in the .dat file", path=path)
    ids = np.array([r[0] for r in blocks[0]], np.int64)
    out = np.empty((len(blocks), ids.size, 3))
    for k, b in enumerate(blocks):
        if len(b) != ids.size or any(r[0] != i for r, i in zip(b, ids)):
            raise ResultParseError(f"block {k + 1} of set {set_name} lists other nodes", path=path)
        out[k] = np.array([r[1:] for r in b])
    return ids, out
