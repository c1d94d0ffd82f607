"""JSON and CSV writers and the atomic file writer.

Outside references: the public contract's JSON field list (shared/CONTRACT.md), the DG-2 and
DG-5 values of METHODS 7.7 (Franklin, Powell & Workman, *Digital Control of Dynamic Systems*,
3rd ed., ch. 6, from memory; Oppenheim & Schafer, *Discrete-Time Signal Processing*, from
memory), ECMA-404 strict JSON (Python's json parser), RFC 4180 CSV (Python's csv reader), and
POSIX file semantics.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import stat

import control
import numpy as np
import pytest

from loopwright._io import write_files_atomically
from loopwright.discrete import DigitalOptions, design_digital
from loopwright.export import (
    coefficients_csv,
    digital_dict,
    frequency_response_csv,
    render_csv,
    render_json,
    sha256_text,
)

VG, VM, L, C, RC, R = 36.0, 2.5, 22e-6, 100e-6, 30e-3, 4.0
FS, FC = 250e3, 10e3
P_NUM = np.array([RC * C, 1.0]) * VG / VM
P_DEN = np.array([L * C * (R + RC) / R, RC * C + L / R, 1.0])
DG2_B = [0.9429243174, -0.8750470372, -0.9417027652, 0.8762685894]
DG2_A = [1.0, -1.1380866645, 0.1428536463, -0.0047669817]


def _design(number_format="q15"):
    wc, ts = 2 * math.pi * FC, 1 / FS
    p = np.polyval(P_NUM, 1j * wc) / np.polyval(P_DEN, 1j * wc) * np.exp(-1j * wc * 1.5 * ts)
    phase = math.degrees(np.angle(p)) - 360.0
    k = math.tan(math.radians((50.0 - phase - 90.0) / 4 + 45.0)) ** 2
    wz, wp = wc / math.sqrt(k), wc * math.sqrt(k)
    w_i = (1 / abs(p)) / abs((1 + 1j * wc / wz) ** 2 / (1j * wc * (1 + 1j * wc / wp) ** 2))
    num = w_i * np.polymul([1 / wz, 1.0], [1 / wz, 1.0])
    den = np.polymul([1.0, 0.0], np.polymul([1 / wp, 1.0], [1 / wp, 1.0]))
    plant = control.tf2ss(control.tf(P_NUM, P_DEN))  # plant 1 holds 1/VM: Fm = H = 1
    opts = DigitalOptions(sample_rate_hz=FS, number_format=number_format)
    return design_digital(
        num, den, plant, modulator_gain=1.0, sense_gain=1.0, options=opts, f_c_hz=FC
    )


@pytest.fixture(scope="module")
def design():
    return _design()


def test_json_contract_fields_and_values(design):
    text = render_json(design, design_name="bench", design_sha256=sha256_text("x"))
    data = json.loads(text)  # strict JSON: NaN/inf would not be written (allow_nan=False)
    for key in ("sample_rate_hz", "method", "prewarp_hz", "delay_samples", "b", "a"):
        assert key in data
    assert set(data["fixed_point"]) >= {"format", "b_int", "a_int", "shift"}
    assert set(data["loop_z"]) >= {"crossover_hz", "phase_margin_deg", "gain_margin_db"}
    assert data["sample_rate_hz"] == FS
    assert data["method"] == "tustin"
    assert data["prewarp_hz"] == FC
    assert data["delay_samples"] == 1.5
    assert data["b"] == pytest.approx(DG2_B, abs=1e-9)  # DG-2
    assert data["a"] == pytest.approx(DG2_A, abs=1e-9)
    assert data["a"][0] == 1.0
    fx = data["fixed_point"]
    assert fx["format"] == "q15" and fx["shift"] == 14  # DG-5
    assert fx["b_int"] == [15449, -14337, -15429, 14357]
    assert fx["a_int"] == [16384, -18646, 2341, -79]
    for bi, b in zip(fx["b_int"], data["b"], strict=True):
        assert bi == round(b * 2 ** fx["shift"])  # contract: b_int = round(b 2^shift)
    assert data["loop_z"]["crossover_hz"] == pytest.approx(9981.3, abs=2.0)  # DG-3
    assert data["loop_z"]["phase_margin_deg"] == pytest.approx(50.078, abs=0.01)
    assert data["design"] == {"name": "bench", "sha256": sha256_text("x")}
    assert text.endswith("\n")


def test_json_float32_has_no_integers():
    data = digital_dict(_design("float32"))
    assert data["fixed_point"]["format"] == "float32"
    assert data["fixed_point"]["b_int"] is None and data["fixed_point"]["shift"] is None
    assert data["fixed_point"]["b_q"] == [float(np.float32(v)) for v in data["b"]]


def test_csv_coefficients(design):
    rows = list(csv.DictReader(io.StringIO(coefficients_csv(design))))
    assert [int(r["k"]) for r in rows] == [0, 1, 2, 3]
    assert [float(r["b"]) for r in rows] == pytest.approx(DG2_B, abs=1e-9)
    assert [int(r["a_int"]) for r in rows] == [16384, -18646, 2341, -79]


def test_csv_frequency_response_reads_the_margins(design):
    rows = list(csv.DictReader(io.StringIO(frequency_response_csv(design))))
    assert list(rows[0]) == ["f_hz", "mag_db", "phase_deg"]
    f = np.array([float(r["f_hz"]) for r in rows])
    mag = np.array([float(r["mag_db"]) for r in rows])
    ph = np.array([float(r["phase_deg"]) for r in rows])
    assert np.all(np.diff(f) > 0) and f[-1] < FS / 2
    assert -180.0 < ph[0] <= 180.0
    i = int(np.argmax(mag < 0.0))  # first point below 0 dB, next to the crossover (9981 Hz)
    assert f[i - 1] < 9981.3 <= f[i]
    pm = 180.0 + np.interp(0.0, [mag[i], mag[i - 1]], [ph[i], ph[i - 1]])
    assert pm == pytest.approx(50.078, abs=0.2)  # linear interpolation on a 50/decade grid
    files = render_csv(design, basename="bench")
    assert set(files) == {"bench_coefficients.csv", "bench_loop_z.csv"}


def test_write_files_atomically(tmp_path):
    out = tmp_path / "new" / "dir"
    paths = write_files_atomically(out, {"a.txt": "alpha\n", "b.bin": b"\x00\x01"})
    assert [p.name for p in paths] == ["a.txt", "b.bin"]
    assert (out / "a.txt").read_text() == "alpha\n"
    assert (out / "b.bin").read_bytes() == b"\x00\x01"
    mode = stat.S_IMODE(os.stat(out / "a.txt").st_mode)
    assert mode & 0o044  # not the 0600 of a temporary file (usual umask 022)
    assert sorted(os.listdir(out)) == ["a.txt", "b.bin"]  # no temporary files left


def test_write_files_refuses_to_overwrite(tmp_path):
    (tmp_path / "a.txt").write_text("keep")
    with pytest.raises(FileExistsError, match="refusing to overwrite.*a.txt"):
        write_files_atomically(tmp_path, {"c.txt": "new", "a.txt": "replace"})
    assert (tmp_path / "a.txt").read_text() == "keep"
    assert not (tmp_path / "c.txt").exists()  # nothing written when one target exists
    write_files_atomically(tmp_path, {"c.txt": "new", "a.txt": "replace"}, force=True)
    assert (tmp_path / "a.txt").read_text() == "replace"
    assert sorted(os.listdir(tmp_path)) == ["a.txt", "c.txt"]


@pytest.mark.parametrize("name", ["", ".", "..", "sub/a.txt", "../a.txt"])
def test_write_files_rejects_paths(tmp_path, name):
    with pytest.raises(ValueError, match="plain name"):
        write_files_atomically(tmp_path, {name: "x"})


def test_render_dispatch_names_files(design):
    from loopwright.export import render

    text = "name = 'bench'\n"
    assert set(render(design, "c", design_name="Bench 1", design_text=text)) == {
        "bench_1.h",
        "bench_1.c",
    }
    js = render(design, "json", design_name="Bench 1", design_text=text)
    assert json.loads(js["bench_1_digital.json"])["design"]["sha256"] == sha256_text(text)
    assert len(render(design, "csv", design_name="Bench 1", design_text=text)) == 2
    with pytest.raises(ValueError, match="format"):
        render(design, "xml", design_name="b", design_text=text)
