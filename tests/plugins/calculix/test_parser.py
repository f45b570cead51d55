"""Tests of the CalculiX result parser on stored ccx 2.20 outputs (no solver needed).

Fixtures: fixtures/calculix/*/ (see its README.md). Every numeric tolerance names its source.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bridge.errors import ResultParseError
from modebridge_calculix import parser
from modebridge_calculix.parser import (FrdResult, _read_frd_lines, read_dat,
                                        read_dat_file, read_frd, read_results)

FIXTURES = Path(__file__).parents[3] / "fixtures" / "calculix"
ASCII_CASES = ["plate_s8r_ascii", "plate_s8r_expanded", "block_c3d20r_free",
               "plate_s8r_multistep_ascii"]
ALL_CASES = ASCII_CASES + ["plate_s8r_binary", "plate_s8r_multistep_binary"]
FRD_FIELDS = ("node_ids", "coordinates", "mode_numbers", "frequencies", "displacements")

# Steel plate/block of the decks (mm-N-t-s), see fixtures/calculix/README.md.
E, NU, RHO, A, H = 210000.0, 0.3, 7.85e-9, 100.0, 2.0


def frd_path(case: str) -> Path:
    return FIXTURES / case / f"{case}.frd"


def dat_path(case: str) -> Path:
    return FIXTURES / case / f"{case}.dat"


def assert_frd_equal(a: FrdResult, b: FrdResult) -> None:
    for name in FRD_FIELDS:
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype, name
        assert x.shape == y.shape, name
        assert np.array_equal(x, y, equal_nan=True), name  # exact: float(text) for every field


# --------------------------------------------------------------------------------------------
# fast reader against the plain reference reader
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("case", ASCII_CASES)
def test_fast_reader_equals_reference_reader(case):
    fast, plain = read_frd(frd_path(case)), _read_frd_lines(frd_path(case))
    assert_frd_equal(fast, plain)
    assert not np.isnan(fast.displacements).any()


@pytest.mark.parametrize("case", ASCII_CASES)
def test_fast_path_covers_ccx_output(case, monkeypatch):
    """ccx output must never need the slow line-by-line fallback."""
    def refuse(*args, **kwargs):
        raise AssertionError("slow path used")
    monkeypatch.setattr(parser._BlockReader, "_read_ascii_slow", refuse)
    read_frd(frd_path(case))


@pytest.mark.parametrize("case", ALL_CASES)
def test_tiny_chunks_give_the_same_result(case, monkeypatch):
    """Chunk boundaries inside records and blocks must not change anything."""
    expected = read_frd(frd_path(case))
    monkeypatch.setattr(parser, "_CHUNK_BYTES", 333)
    monkeypatch.setattr(parser, "_SKIP_BYTES", 37)
    assert_frd_equal(read_frd(frd_path(case)), expected)


def test_result_types_and_read_only():
    frd = read_frd(frd_path("plate_s8r_ascii"))
    assert frd.node_ids.dtype == np.int64 and frd.mode_numbers.dtype == np.int64
    assert frd.coordinates.dtype == np.float64 and frd.displacements.dtype == np.float64
    assert frd.displacements.shape == (6, frd.node_ids.size, 3)
    with pytest.raises(ValueError):
        frd.displacements[0, 0, 0] = 1.0
    dat = read_dat_file(dat_path("plate_s8r_ascii"))
    assert dat.participation.shape == (6, 6) and dat.effective_mass.shape == (6, 6)
    assert dat.total_effective_mass.shape == (6,)
    with pytest.raises(ValueError):
        dat.eigenvalues[0] = 1.0


# --------------------------------------------------------------------------------------------
# consistency between files
# --------------------------------------------------------------------------------------------

@pytest.mark.parametrize("ascii_case, binary_case", [
    ("plate_s8r_ascii", "plate_s8r_binary"),
    ("plate_s8r_multistep_ascii", "plate_s8r_multistep_binary"),
])
def test_binary_and_ascii_frd_agree(ascii_case, binary_case):
    a, b = read_frd(frd_path(ascii_case)), read_frd(frd_path(binary_case))
    assert np.array_equal(a.node_ids, b.node_ids)
    assert np.array_equal(a.mode_numbers, b.mode_numbers)
    assert np.array_equal(a.frequencies, b.frequencies)  # same 100CL header text in both
    # Both hold the same double v: E12.5 text keeps 6 significant digits (|text - v| <= 5e-6|v|,
    # half a unit of the 5th decimal), the binary record is float32 (|f32 - v| <= 2**-24 |v|);
    # 1e-44 covers float32 denormals. Source: the two record formats.
    rel = 5e-6 + 2.0 ** -24
    assert np.all(np.abs(a.displacements - b.displacements) <= rel * np.abs(b.displacements) + 1e-44)
    # Binary coordinates are float64, ASCII ones E12.5: 5e-6 relative (same source).
    assert np.all(np.abs(a.coordinates - b.coordinates) <= 5e-6 * np.abs(b.coordinates))


def _print_half_unit_dat(x: np.ndarray) -> np.ndarray:
    """Half a unit in the last place of ccx's .dat print 0.ddddddd E+xx (7 significant digits)."""
    ax = np.abs(x)
    exp = np.floor(np.log10(np.where(ax > 0, ax, 1.0))) + 1
    return np.where(ax > 0, 0.5 * 10.0 ** (exp - 7), 0.0)


def _print_half_unit_frd(x: np.ndarray) -> np.ndarray:
    """Half unit of the 12-character 100CL field: E12.5 below 1, else 11 digits with the point."""
    ax = np.abs(x)
    exp = np.floor(np.log10(np.where(ax > 0, ax, 1.0)))
    digits_before = exp + 1
    fixed = 0.5 * 10.0 ** (digits_before - 10)      # 12 chars = blank, point, 10 digits
    return np.where(ax == 0, 0.0, np.where(ax < 1, 0.5 * 10.0 ** (exp - 5), fixed))


@pytest.mark.parametrize("case", ALL_CASES)
def test_dat_frequencies_equal_frd_headers(case):
    dat, frd = read_results(FIXTURES / case, case)
    assert np.array_equal(dat.mode_numbers, frd.mode_numbers)
    # Agreement to print precision of both files (source: the two print formats).
    tol = _print_half_unit_dat(dat.frequencies) + _print_half_unit_frd(frd.frequencies)
    assert np.all(np.abs(dat.frequencies - frd.frequencies) <= tol * (1 + 1e-12))


@pytest.mark.parametrize("case", ALL_CASES)
def test_frequency_column_is_sqrt_eigenvalue_over_2pi(case):
    dat = read_dat_file(dat_path(case))
    positive = dat.eigenvalues > 0
    # f = sqrt(lambda) / (2 pi) (definition). Both columns carry 7 significant digits: relative
    # print error 5e-7 each, halved by the square root for lambda (source: the print format).
    f = np.sqrt(dat.eigenvalues[positive]) / (2 * math.pi)
    assert np.allclose(dat.frequencies[positive], f, rtol=5e-7 * 1.5 + 1e-12, atol=0)
    # CalculiX prints 0 in the frequency column for a negative eigenvalue (observed, ccx 2.20).
    assert np.all(dat.frequencies[~positive] == 0.0)


# --------------------------------------------------------------------------------------------
# physics of the fixtures
# --------------------------------------------------------------------------------------------

def test_clamped_plate_first_frequency():
    # Source: Leissa 1969 (NASA SP-160), clamped square plate lambda^2 = 35.99 (from memory),
    # f1 = lambda^2 / (2 pi a^2) * sqrt(D / (rho h)) = 1793 Hz for this plate.
    d = E * H ** 3 / (12 * (1 - NU ** 2))
    f_ref = 35.99 / (2 * math.pi * A ** 2) * math.sqrt(d / (RHO * H))
    assert abs(f_ref - 1793) < 1
    for case in ("plate_s8r_ascii", "plate_s8r_expanded", "plate_s8r_binary"):
        f1 = read_frd(frd_path(case)).frequencies[0]
        # 8 %: common practice for a coarse mesh, no source. The 6 x 6 S8R mesh gives +4.1 %
        # (a 4 x 4 mesh gives +15.9 %, which is why the fixtures use 6 x 6).
        assert abs(f1 / f_ref - 1) < 0.08, case
        assert read_dat_file(dat_path(case)).frequencies[0] == pytest.approx(f1, rel=1e-6)


def test_free_block_rigid_modes_and_mass():
    dat = read_dat_file(dat_path("block_c3d20r_free"))
    frd = read_frd(frd_path("block_c3d20r_free"))
    assert dat.mode_numbers.tolist() == list(range(1, 11))
    # A free body has 6 rigid-body modes (mechanics); "near zero" taken as below 1e-3 of the
    # first elastic frequency: common practice, no source.
    assert np.all(np.abs(frd.frequencies[:6]) < 1e-3 * frd.frequencies[6])
    assert np.all(np.abs(dat.eigenvalues[:6]) < 1e-6 * dat.eigenvalues[6])
    assert np.all(frd.frequencies[6:] > 100.0)
    # Some rigid-body eigenvalues come out negative; ccx prints frequency 0 for them (observed).
    assert (dat.eigenvalues[:6] < 0).any()
    assert np.all(frd.frequencies[:6][dat.eigenvalues[:6] < 0] == 0.0)
    # Total effective mass in x, y, z = block mass rho*V = 7.85e-9 * 100*100*2 = 1.57e-4 t
    # (source: mass conservation of mass-normalised modes incl. rigid modes); 0.5 %: brief.
    mass = RHO * A * A * H
    assert np.allclose(dat.total_effective_mass[:3], mass, rtol=5e-3)
    # The sum of the modal effective masses equals the total (source: definition); 1e-6 rel.
    # covers the 7-digit print (common practice, no source).
    assert np.allclose(dat.effective_mass[:, :3].sum(axis=0), dat.total_effective_mass[:3],
                       rtol=1e-6)


def test_shell_output_2d_and_expanded_nodes():
    two_d, expanded = read_frd(frd_path("plate_s8r_ascii")), read_frd(frd_path("plate_s8r_expanded"))
    # 6 x 6 S8R: (2n+1)^2 - n^2 = 133 shell nodes (mesh); expansion to C3D20R gives 3 nodes per
    # corner node and 2 per mid-side node: 3*49 + 2*84 = 315 (observed ccx behaviour).
    assert two_d.node_ids.tolist() == list(range(1, 134))
    assert expanded.node_ids.size == 315 and expanded.node_ids.min() > 133
    assert np.all(two_d.coordinates[:, 2] == 0.0)
    assert set(np.unique(expanded.coordinates[:, 2])) == {-1.0, 0.0, 1.0}  # +-h/2 (expansion)
    assert np.array_equal(two_d.frequencies, expanded.frequencies)  # same deck otherwise


def test_multistep_takes_last_frequency_step():
    # Deck: static step, frequency step with 2 modes (+ STRESS, ERROR), frequency step with 3.
    for case in ("plate_s8r_multistep_ascii", "plate_s8r_multistep_binary"):
        dat, frd = read_results(FIXTURES / case, case)
        assert dat.mode_numbers.tolist() == [1, 2, 3]
        assert frd.mode_numbers.tolist() == [1, 2, 3]
        assert frd.displacements.shape == (3, 155, 3)
        assert not np.isnan(frd.displacements).any()
    single = read_frd(frd_path("plate_s8r_expanded"))
    # The 4 x 4 plate's f1 differs from the 6 x 6 plate's: just check the multistep modes are
    # elastic (not the static step's load case, whose 100CL frequency field is 1.0).
    assert np.all(frd.frequencies > 1000.0) and single.frequencies[0] > 1000.0


# --------------------------------------------------------------------------------------------
# robustness: node order, line ends, irregular records
# --------------------------------------------------------------------------------------------

def _lines(case: str) -> list[str]:
    return frd_path(case).read_text().splitlines(keepends=True)


def _disp_block_ranges(lines: list[str]) -> list[tuple[int, int]]:
    """(first, end) line indices of the records of each DISP block."""
    ranges = []
    for i, line in enumerate(lines):
        if line.startswith(" -4  DISP"):
            first = i + 1
            while lines[first].startswith(" -5"):
                first += 1
            end = first
            while not lines[end].startswith(" -3"):
                end += 1
            ranges.append((first, end))
    return ranges


def test_results_mapped_by_node_id(tmp_path):
    lines = _lines("plate_s8r_ascii")
    first, end = _disp_block_ranges(lines)[1]
    block = lines[first:end]
    dropped = block[5]
    block = block[::-1]
    block.remove(dropped)                        # reverse the order and skip one node
    lines[first:end] = block
    header = next(i for i in range(first, 0, -1) if lines[i].startswith("  100CL"))
    lines[header] = lines[header][:24] + f"{len(block):12d}" + lines[header][36:]
    path = tmp_path / "shuffled.frd"
    path.write_text("".join(lines))
    got, ref = read_frd(path), read_frd(frd_path("plate_s8r_ascii"))
    assert_frd_equal(got, _read_frd_lines(path))
    missing = int(dropped[3:13])
    k = int(np.flatnonzero(got.node_ids == missing)[0])
    assert np.isnan(got.displacements[1, k]).all()
    keep = np.ones(got.node_ids.size, bool)
    keep[k] = False
    assert np.array_equal(got.displacements[1, keep], ref.displacements[1, keep])
    assert np.array_equal(got.displacements[[0, 2, 3, 4, 5]], ref.displacements[[0, 2, 3, 4, 5]])


def test_crlf_line_ends(tmp_path):
    path = tmp_path / "crlf.frd"
    path.write_bytes(frd_path("block_c3d20r_free").read_bytes().replace(b"\n", b"\r\n"))
    assert_frd_equal(read_frd(path), read_frd(frd_path("block_c3d20r_free")))


def test_irregular_record_falls_back_to_line_parser(tmp_path):
    lines = _lines("plate_s8r_ascii")
    first, _ = _disp_block_ranges(lines)[0]
    rec = lines[first + 3]
    # A 3-digit exponent makes a negative E12.5 field 13 characters wide (C printf).
    lines[first + 3] = rec[:13] + "-1.00000E-100" + rec[25:]
    path = tmp_path / "wide.frd"
    path.write_text("".join(lines))
    got = read_frd(path)
    ref = read_frd(frd_path("plate_s8r_ascii"))
    assert got.displacements[0, 3, 0] == -1e-100
    assert np.array_equal(got.displacements[0, 3, 1:], ref.displacements[0, 3, 1:])
    assert np.array_equal(got.displacements[1:], ref.displacements[1:])


def _synthetic_frd(values: list[float]) -> str:
    """A minimal ASCII .frd with one node per value triple, one mode, fields printed E12.5."""
    triples = [values[i:i + 3] for i in range(0, len(values) - len(values) % 3, 3)]
    n = len(triples)
    out = ["    1C\n", f"    2C{'':18s}{n:12d}{'':37s}1\n"]
    out += [f" -1{k + 1:10d}{0.0:12.5E}{float(k):12.5E}{0.0:12.5E}\n" for k in range(n)]
    out += [" -3\n", "    1PSTEP                         1           1           1\n",
            "    1PMODE                         1\n",
            f"  100CL  101 1.000000000{n:12d}                     2    1MODAL      1\n",
            " -4  DISP        4    1\n", " -5  D1          1    2    1    0\n",
            " -5  D2          1    2    2    0\n", " -5  D3          1    2    3    0\n",
            " -5  ALL         1    2    0    0    1ALL\n"]
    out += [f" -1{k + 1:10d}" + "".join(f"{v:12.5E}" for v in t) + "\n" for k, t in enumerate(triples)]
    out += [" -3\n", " 9999\n"]
    return "".join(out)


_E125 = st.one_of(
    st.floats(min_value=-1e30, max_value=1e30, allow_nan=False),
    st.floats(min_value=-1e-15, max_value=1e-15, allow_nan=False),   # exponents below -17
    st.sampled_from([0.0, -0.0, 9.999995, -9.999995e-99, 1e99, 5e-324]),
)


@settings(max_examples=60, deadline=None)
@given(st.lists(_E125, min_size=3, max_size=90))
def test_e125_conversion_is_exact(tmp_path_factory, values):
    """Every printed E12.5 field must come back as float(text), bit for bit."""
    path = tmp_path_factory.mktemp("syn") / "syn.frd"
    path.write_text(_synthetic_frd(values))
    got = read_frd(path)
    n = got.node_ids.size
    texts = [f"{v:12.5E}" for v in values[:3 * n]]
    expected = np.array([float(t) for t in texts]).reshape(n, 3)
    assert np.array_equal(got.displacements[0], expected)
    assert np.array_equal(np.signbit(got.displacements[0]), np.signbit(expected))
    if all(len(t) == 12 for t in texts):   # the reference reader knows fixed fields only
        assert_frd_equal(got, _read_frd_lines(path))


# --------------------------------------------------------------------------------------------
# truncated and malformed files
# --------------------------------------------------------------------------------------------

def _raises_both(path: Path, match: str) -> ResultParseError:
    with pytest.raises(ResultParseError, match=match) as fast:
        read_frd(path)
    with pytest.raises(ResultParseError):
        _read_frd_lines(path)
    assert fast.value.path == str(path)
    return fast.value


def test_frd_cut_inside_a_mode_block(tmp_path):
    lines = _lines("plate_s8r_expanded")
    first, end = _disp_block_ranges(lines)[2]
    cut = (first + end) // 2
    path = tmp_path / "cut.frd"
    path.write_text("".join(lines[:cut]))
    err = _raises_both(path, "DISP block of mode 3")
    assert err.line == cut                       # the last line that is there


def test_frd_cut_inside_a_record(tmp_path):
    lines = _lines("plate_s8r_ascii")
    first, end = _disp_block_ranges(lines)[0]
    path = tmp_path / "cut.frd"
    path.write_text("".join(lines[:first + 4]) + lines[first + 4][:20])
    err = _raises_both(path, "truncated")
    assert err.line == first + 5


def test_frd_cut_before_end_record(tmp_path):
    lines = _lines("block_c3d20r_free")
    assert lines[-1].startswith(" 9999")
    path = tmp_path / "cut.frd"
    path.write_text("".join(lines[:-1]))
    err = _raises_both(path, "9999")
    assert err.line == len(lines) - 1


def test_frd_missing_block_end(tmp_path):
    lines = _lines("plate_s8r_ascii")
    first, end = _disp_block_ranges(lines)[1]
    del lines[end]                               # the ' -3' of mode 2
    path = tmp_path / "no_end.frd"
    path.write_text("".join(lines))
    err = _raises_both(path, "mode 2")
    assert err.line is not None


def test_frd_missing_element_block_end(tmp_path):
    lines = _lines("plate_s8r_ascii")
    start = next(i for i, line in enumerate(lines) if line.startswith("    3C"))
    end = next(i for i in range(start, len(lines)) if lines[i].startswith(" -3"))
    del lines[end]
    path = tmp_path / "no_end.frd"
    path.write_text("".join(lines))
    with pytest.raises(ResultParseError, match="element") as err:
        read_frd(path)
    assert err.value.line == end + 1             # the header line that follows the block


def test_frd_empty(tmp_path):
    path = tmp_path / "empty.frd"
    path.write_bytes(b"")
    _raises_both(path, "empty")


def test_binary_frd_truncated(tmp_path):
    data = frd_path("plate_s8r_binary").read_bytes()
    mode3 = data.find(b"1PMODE                         3")
    path = tmp_path / "cut.frd"
    path.write_bytes(data[:data.find(b"1ALL\n", mode3) + 5 + 100])
    with pytest.raises(ResultParseError, match="truncated"):
        read_frd(path)
    path.write_bytes(data[:-6])                  # without ' 9999'
    with pytest.raises(ResultParseError, match="9999"):
        read_frd(path)


def test_binary_rejected_by_reference_reader():
    with pytest.raises(ResultParseError, match="binary"):
        _read_frd_lines(frd_path("plate_s8r_binary"))


# --------------------------------------------------------------------------------------------
# .dat
# --------------------------------------------------------------------------------------------

def test_dat_values_of_plate():
    dat = read_dat_file(dat_path("plate_s8r_ascii"))
    assert dat.mode_numbers.tolist() == [1, 2, 3, 4, 5, 6]
    text = dat_path("plate_s8r_ascii").read_text().splitlines()
    row = next(line for line in text if line.split()[:1] == ["1"]).split()
    assert dat.eigenvalues[0] == float(row[1]) and dat.frequencies[0] == float(row[3])
    # Modes 2 and 3 of a square plate are a degenerate pair (symmetry).
    assert dat.frequencies[1] == dat.frequencies[2]
    # Clamped plate: effective mass below the plate mass (part of it sits on the supports).
    assert np.all(dat.total_effective_mass[:3] < RHO * A * A * H)


def test_dat_from_stream():
    text = dat_path("block_c3d20r_free").read_text()
    from_stream = read_dat(io.StringIO(text))
    from_file = read_dat_file(dat_path("block_c3d20r_free"))
    for name in ("mode_numbers", "eigenvalues", "frequencies", "participation",
                 "effective_mass", "total_effective_mass"):
        assert np.array_equal(getattr(from_stream, name), getattr(from_file, name)), name
    with pytest.raises(ResultParseError, match="<stream>"):
        read_dat(io.StringIO(""))


def test_dat_last_frequency_step():
    dat = read_dat_file(dat_path("plate_s8r_multistep_ascii"))
    text = dat_path("plate_s8r_multistep_ascii").read_text()
    assert text.count("E I G E N V A L U E   O U T P U T") == 2
    assert dat.mode_numbers.tolist() == [1, 2, 3]
    assert dat.participation.shape == (3, 6) and dat.effective_mass.shape == (3, 6)


def test_dat_empty(tmp_path):
    path = tmp_path / "empty.dat"
    path.write_text("")
    with pytest.raises(ResultParseError, match="empty"):
        read_dat_file(path)
    path.write_text("\n\n   \n")
    with pytest.raises(ResultParseError, match="empty"):
        read_dat_file(path)


def test_dat_without_eigenvalue_table(tmp_path):
    lines = dat_path("plate_s8r_ascii").read_text().splitlines(keepends=True)
    start = next(i for i, line in enumerate(lines) if "E I G E N V A L U E" in line)
    stop = next(i for i, line in enumerate(lines) if "P A R T I C I P A T I O N" in line)
    path = tmp_path / "no_eigen.dat"
    path.write_text("".join(lines[:start] + lines[stop:]))
    with pytest.raises(ResultParseError, match="no eigenvalue table"):
        read_dat_file(path)
    path.write_text(" displacements (vx,vy,vz) for set NALL and time  0.1000000E+01\n\n"
                    "         1  0.000000E+00  0.000000E+00  0.000000E+00\n")
    with pytest.raises(ResultParseError, match="no eigenvalue table"):
        read_dat_file(path)


def test_dat_malformed_row(tmp_path):
    lines = dat_path("plate_s8r_ascii").read_text().splitlines(keepends=True)
    k = next(i for i, line in enumerate(lines) if line.split()[:1] == ["3"])
    lines[k] = lines[k].rsplit(None, 1)[0] + "\n"   # drop the imaginary part column
    path = tmp_path / "bad.dat"
    path.write_text("".join(lines))
    with pytest.raises(ResultParseError) as err:
        read_dat_file(path)
    assert err.value.line == k + 1


def test_read_results_mode_mismatch(tmp_path):
    case = "plate_s8r_ascii"
    lines = dat_path(case).read_text().splitlines(keepends=True)
    for name in ("dat", "frd"):
        (tmp_path / f"job.{name}").write_bytes((FIXTURES / case / f"{case}.{name}").read_bytes())
    # keep only modes 1-5 in every table of the .dat
    text = "".join(line for line in lines if line.split()[:1] != ["6"])
    (tmp_path / "job.dat").write_text(text)
    with pytest.raises(ResultParseError, match="modes"):
        read_results(tmp_path, "job")


def test_missing_files(tmp_path):
    with pytest.raises(ResultParseError):
        read_frd(tmp_path / "nope.frd")
    with pytest.raises(ResultParseError):
        read_dat_file(tmp_path / "nope.dat")


# --- the reader checks what it reads: headings, units, table variants -----------------------

_CYCLIC = Path(__file__).resolve().parents[3] / "fixtures" / "calculix" / "cyclic" / "ringfcontact3.dat"


def test_cyclic_symmetry_table_is_refused_naming_it():
    # CalculiX's own test deck ringfcontact3 (Debian calculix-ccx-test, fixtures/calculix/cyclic):
    # NODAL DIAMETER / MODE NO / FREQUENCY columns and no EIGENVALUE column. Read as a plain
    # table it would give modes 1, 1, 1 … with eigenvalues 1, 2, 3 …
    with pytest.raises(ResultParseError, match="cyclic symmetry") as exc:
        read_dat_file(_CYCLIC)
    assert "ringfcontact3.dat" in str(exc.value)


_PLAIN = """
     E I G E N V A L U E   O U T P U T

 MODE NO    EIGENVALUE                       FREQUENCY
                                     REAL PART            IMAGINARY PART
                           (RAD/TIME)      (CYCLES/TIME     (RAD/TIME)

      1   0.1375685E+09   0.1172896E+05   0.1866722E+04   {imag}
"""


def test_plain_table_reads_and_variants_are_refused():
    ok = read_dat(io.StringIO(_PLAIN.format(imag="0.0000000E+00")))
    assert ok.frequencies[0] == pytest.approx(1866.722)  # the row's own value
    # complex frequencies (a damped step): a real part and an imaginary part at once
    with pytest.raises(ResultParseError, match="complex frequencies"):
        read_dat(io.StringIO(_PLAIN.format(imag="0.1000000E+02")))
    # headings that do not say what the columns are: refused, never guessed
    with pytest.raises(ResultParseError, match="column headings lack EIGENVALUE"):
        read_dat(io.StringIO(_PLAIN.format(imag="0.0000000E+00").replace("EIGENVALUE   ", "LAMBDA       ", 1)
                             .replace("E I G E N V A L U E", "E I G E N V A L U E")))
    # columns that disagree with λ = ω², ω = 2πf (e.g. shifted): refused
    with pytest.raises(ResultParseError, match="do not agree"):
        read_dat(io.StringIO(_PLAIN.format(imag="0.0000000E+00").replace("0.1866722E+04", "0.1966722E+04")))


# --------------------------------------------------------------------------------------------
# binary .frd (the default since the deck asks *NODE OUTPUT): corrupt files and other orders
# --------------------------------------------------------------------------------------------

def _first_disp_record(data: bytes) -> int:
    """Byte offset of the first record of the first DISP block of a binary .frd."""
    at = data.index(b" -4  DISP")
    for _ in range(5):                   # the ' -4' line and its four ' -5' component lines
        at = data.index(b"\n", at) + 1
    return at


def test_binary_frd_corrupt_node_id(tmp_path):
    data = bytearray(frd_path("plate_s8r_binary").read_bytes())
    at = _first_disp_record(bytes(data))
    data[at:at + 4] = np.int32(987654).tobytes()
    path = tmp_path / "corrupt.frd"
    path.write_bytes(bytes(data))
    with pytest.raises(ResultParseError, match="987654.*not in the node block"):
        read_frd(path)


def test_binary_frd_count_beyond_the_file(tmp_path):
    data = frd_path("plate_s8r_binary").read_bytes()
    line = data.index(b"    2C")
    end = data.index(b"\n", line)
    fields = data[line:end].split()
    count = fields[1]
    bigger = str(int(count) * 1000).encode().rjust(len(count))
    head = data[line:end].replace(count, bigger, 1)
    path = tmp_path / "count.frd"
    path.write_bytes(data[:line] + head + data[end:])
    with pytest.raises(ResultParseError, match="truncated"):
        read_frd(path)


def test_binary_frd_block_in_another_order_is_mapped_by_id(tmp_path):
    data = bytearray(frd_path("plate_s8r_binary").read_bytes())
    at = _first_disp_record(bytes(data))
    first, second = bytes(data[at:at + 16]), bytes(data[at + 16:at + 32])
    data[at:at + 16], data[at + 16:at + 32] = second, first   # swap the first two records
    path = tmp_path / "swapped.frd"
    path.write_bytes(bytes(data))
    a, b = read_frd(frd_path("plate_s8r_binary")), read_frd(path)
    np.testing.assert_array_equal(a.displacements, b.displacements)
    np.testing.assert_array_equal(a.node_ids, b.node_ids)
    assert not b.displacements.flags.writeable


@pytest.mark.parametrize("chunk", [None, 7])
def test_binary_frd_late_records_out_of_order_are_mapped_by_id(tmp_path, monkeypatch, chunk):
    """The in-order test of a DISP block covers its whole length, not its start only: two records
    near the end of the last mode swapped are still placed by id (the unswapped file's result),
    also when the block is read in chunks of 7 records (the swap then lies in a later chunk)."""
    a = read_frd(frd_path("plate_s8r_binary"))
    assert a.displacements.flags.c_contiguous and a.displacements.dtype == np.float64
    if chunk:
        monkeypatch.setattr(parser, "_BINARY_CHUNK", chunk)
        np.testing.assert_array_equal(read_frd(frd_path("plate_s8r_binary")).displacements, a.displacements)
    rows = a.displacements[-1]
    k = int(np.flatnonzero((rows[:-1] != rows[1:]).any(axis=1))[-1])   # the last distinct neighbours
    data = bytearray(frd_path("plate_s8r_binary").read_bytes())
    at = data.rindex(b" -4  DISP")
    for _ in range(5):                   # the ' -4' line and its four ' -5' component lines
        at = data.index(b"\n", at) + 1
    r0, r1 = at + 16 * k, at + 16 * (k + 1)
    first, second = bytes(data[r0:r1]), bytes(data[r1:r1 + 16])
    data[r0:r1], data[r1:r1 + 16] = second, first
    path = tmp_path / "swapped_late.frd"
    path.write_bytes(bytes(data))
    b = read_frd(path)
    assert k > a.node_ids.size // 2
    np.testing.assert_array_equal(a.displacements, b.displacements)
