"""Tests of tsunamifocus.io.subfaults: reading and row-by-row validation of subfault tables."""

from __future__ import annotations

import math

import pytest

from tsunamifocus.errors import DataFileError, InputError
from tsunamifocus.io.subfaults import read_subfault_table

HEADER = "lon,lat,depth_km,strike_deg,dip_deg,rake_deg,length_km,width_km,slip_m"
ROW = "140.0,35.0,10.0,20.0,15.0,90.0,20.0,15.0,3.0"


def write(tmp_path, text, name="model.csv", encoding="utf-8"):
    p = tmp_path / name
    p.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return p


def test_reads_rows_with_comments_and_any_column_order(tmp_path):
    cols = HEADER.split(",")[::-1]
    vals = ROW.split(",")[::-1]
    text = "# slip model\n\n" + ",".join(cols) + "\n# a comment between rows\n" + ",".join(vals) + "\n" + \
        ",".join(vals).replace("3.0", "0.0", 1) + "\n"
    t = read_subfault_table(write(tmp_path, text), depth_at="top")
    assert len(t) == 2
    assert list(t["line"]) == [5, 6]  # file lines of the rows (comments and blank lines counted)
    assert t["slip_m"].tolist() == [3.0, 0.0]
    assert t["top_depth_km"].iloc[0] == 10.0
    assert math.isnan(t["rigidity_pa"].iloc[0])
    assert t.attrs["depth_at"] == "top"


def test_centroid_depth_gives_the_top_edge_depth(tmp_path):
    t = read_subfault_table(write(tmp_path, f"{HEADER}\n{ROW}\n"), depth_at="centroid")
    # top = centroid depth - W/2 sin(dip) (geometry of a planar rectangle)
    assert t["top_depth_km"].iloc[0] == pytest.approx(10.0 - 7.5 * math.sin(math.radians(15.0)))


def test_utf8_bom_is_accepted(tmp_path):
    t = read_subfault_table(write(tmp_path, b"\xef\xbb\xbf" + f"{HEADER}\n{ROW}\n".encode()), depth_at="top")
    assert len(t) == 1


@pytest.mark.parametrize("text, message", [
    (f"{HEADER}\n{ROW}\n{ROW.replace('15.0,90.0', '95.0,90.0')}\n",
     r"model.csv:3: column 'dip_deg' = '95.0': expected a number > 0 and <= 90 degrees"),
    (f"{HEADER}\n{ROW.replace('3.0', 'abc')}\n", r"model.csv:2: column 'slip_m' = 'abc': expected a number >= 0"),
    (f"{HEADER}\n{ROW.replace('3.0', '-1')}\n", r"model.csv:2: column 'slip_m' = '-1'"),
    (f"{HEADER}\n{ROW.replace('3.0', 'nan')}\n", r"model.csv:2: column 'slip_m' = 'nan'"),
    (f"{HEADER}\n{ROW.replace('35.0', '135.0')}\n", r"model.csv:2: column 'lat' = '135.0'"),
    (f"{HEADER}\n{ROW},7\n", r"model.csv:2: 10 values, but the header \(line 1\) has 9 columns"),
    (f"{HEADER.replace('slip_m', 'slip')}\n{ROW}\n", r"model.csv:1: unknown column 'slip' .*did you mean 'slip_m'"),
    (f"{HEADER.replace(',slip_m', '')}\n", r"model.csv:1: header lacks column\(s\) slip_m"),
    (f"{HEADER},lon\n", r"model.csv:1: column 'lon' appears twice"),
    (f"{HEADER}\n{ROW.replace('3.0', '0')}\n", r"model.csv: every subfault has slip_m = 0"),
    (f"{HEADER}\n", r"model.csv: the table has a header \(line 1\) but no subfault rows"),
    ("# only a comment\n", r"model.csv: empty subfault table"),
])
def test_bad_tables_are_one_line_errors(tmp_path, text, message):
    with pytest.raises(InputError, match=message) as exc:
        read_subfault_table(write(tmp_path, text), depth_at="top")
    assert "\n" not in str(exc.value)


def test_centroid_above_the_sea_floor_is_refused(tmp_path):
    row = ROW.replace("140.0,35.0,10.0", "140.0,35.0,1.0")
    with pytest.raises(InputError, match=r"model.csv:2: column 'depth_km' = '1.0': expected a centroid depth "
                       r">= 1.94 km"):
        read_subfault_table(write(tmp_path, f"{HEADER}\n{row}\n"), depth_at="centroid")
    # the same number as a top-edge depth is fine
    assert len(read_subfault_table(write(tmp_path, f"{HEADER}\n{row}\n"), depth_at="top")) == 1


def test_file_problems(tmp_path):
    with pytest.raises(DataFileError, match="subfault table not found"):
        read_subfault_table(tmp_path / "none.csv", depth_at="top")
    with pytest.raises(DataFileError, match="is a folder"):
        read_subfault_table(tmp_path, depth_at="top")
    with pytest.raises(DataFileError, match=r"model.csv:2: not UTF-8"):
        read_subfault_table(write(tmp_path, f"{HEADER}\n".encode() + b"\xff\xfe\n"), depth_at="top")
    with pytest.raises(InputError, match=r'depth_at = .middle.: expected "top"'):
        read_subfault_table(write(tmp_path, f"{HEADER}\n{ROW}\n"), depth_at="middle")
