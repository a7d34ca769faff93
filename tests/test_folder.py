"""The watched-folder VNA: new Touchstone files become sweeps after validation.

Reference data are written by scikit-rf (Touchstone v1.1 writer) from its own
media models, so the check is our reader path against scikit-rf's writer.
"""

from __future__ import annotations

import threading

import numpy as np
import pytest
import skrf

from probelog.drivers.errors import InstrumentTimeout, PowerLimitError, TouchstoneRejected, WaitCancelled
from probelog.drivers.folder import FolderVna
from probelog.bench import SweepSettings, Vna

SETTINGS = SweepSettings(start_hz=1e9, stop_hz=67e9, points=67, ifbw_hz=1e3, power_dbm=-10)


def line_network() -> skrf.Network:
    """A 450 um matched line with 0.5 dB/mm loss, eps_eff 6.0 (invented PLX-7 cal-line-a)."""
    freq = skrf.Frequency(1, 67, 67, unit="GHz")
    w = 2 * np.pi * freq.f
    alpha = 0.5 / 8.6859 * 1000  # dB/mm -> Np/m (Pozar 4th ed. sec. 2.7, from memory)
    media = skrf.media.DefinedGammaZ0(freq, gamma=alpha + 1j * w * np.sqrt(6.0) / 299792458.0, z0=50)
    return media.line(450e-6, "m", name="cal-line-a")


def write(folder, name, net):
    net.write_touchstone(str(folder / name))
    return folder / name


def vna(folder, **kw):
    v = FolderVna(folder, timeout_s=kw.pop("timeout_s", 1.0), poll_s=0.01, **kw)
    v.configure(SETTINGS, power_limit_dbm=0.0)
    return v


def test_new_file_is_returned_validated_and_archived(tmp_path):
    old = write(tmp_path, "old.s2p", line_network())  # present before: never taken
    v = vna(tmp_path)
    assert isinstance(v, Vna)
    ref = line_network()
    threading.Timer(0.05, write, (tmp_path, "cal-line-a.s2p", ref)).start()
    net = v.sweep(2)
    np.testing.assert_allclose(net.s, ref.s, atol=1e-9)
    # |S21| of a matched line = exp(-alpha l): 0.5 dB/mm x 0.45 mm = 0.225 dB loss
    assert abs(-20 * np.log10(abs(net.s[0, 1, 0])) - 0.225) < 1e-6
    assert (tmp_path / "archive" / "cal-line-a.s2p").exists()
    assert not (tmp_path / "cal-line-a.s2p").exists() and old.exists()


def test_archive_never_overwrites(tmp_path):
    v = vna(tmp_path)
    for _ in range(2):
        write(tmp_path, "sweep.s2p", line_network())
        v.sweep(2)
    assert sorted(p.name for p in (tmp_path / "archive").iterdir()) == ["sweep-1.s2p", "sweep.s2p"]


def test_wrong_port_count_names_the_file(tmp_path):
    v = vna(tmp_path)
    write(tmp_path, "one.s1p", line_network().s11)
    with pytest.raises(TouchstoneRejected, match=r"one\.s1p: has 1 port\(s\), the sweep needs 2"):
        v.sweep(2)


def test_nan_is_rejected(tmp_path):
    v = vna(tmp_path)
    net = line_network()
    s = net.s.copy()
    s[10, 0, 0] = np.nan
    write(tmp_path, "nan.s2p", skrf.Network(frequency=net.frequency, s=s))
    with pytest.raises(TouchstoneRejected, match=r"nan\.s2p: NaN .* first at 1.1e\+10 Hz"):
        v.sweep(2)


def test_decreasing_frequencies_are_rejected(tmp_path):
    v = vna(tmp_path, match_settings=False)
    text = "# GHz S RI R 50\n1 0.1 0 0.9 0 0.9 0 0.1 0\n3 0.1 0 0.9 0 0.9 0 0.1 0\n2 0.1 0 0.9 0 0.9 0 0.1 0\n"
    (tmp_path / "swap.s2p").write_text(text)
    with pytest.raises(TouchstoneRejected, match=r"swap\.s2p: frequencies do not increase"):
        v.sweep(2)


def test_unreadable_file_is_rejected(tmp_path):
    v = vna(tmp_path)
    (tmp_path / "junk.s2p").write_text("this is not touchstone\n1 2 3\n")
    with pytest.raises(TouchstoneRejected, match=r"junk\.s2p: not a readable Touchstone"):
        v.sweep(2)


def test_settings_mismatch_is_rejected(tmp_path):
    v = vna(tmp_path)
    net = line_network()
    write(tmp_path, "coarse.s2p", net[::2])
    with pytest.raises(TouchstoneRejected, match="plan asks for 67 points"):
        v.sweep(2)


def test_timeout_and_cancel(tmp_path):
    v = vna(tmp_path, timeout_s=0.05)
    with pytest.raises(InstrumentTimeout, match="no new .s1p/.s2p file within 0.05 s"):
        v.sweep(2)
    cancel = threading.Event()
    v = vna(tmp_path, timeout_s=5.0, cancel=cancel)
    threading.Timer(0.05, cancel.set).start()
    with pytest.raises(WaitCancelled):
        v.sweep(2)


def test_power_limit_applies_to_the_folder_too(tmp_path):
    v = FolderVna(tmp_path)
    with pytest.raises(PowerLimitError):
        v.configure(SweepSettings(1e9, 2e9, 11, power_dbm=3.0), power_limit_dbm=0.0)


def test_decreasing_frequencies_in_one_port_are_rejected(tmp_path):
    v = vna(tmp_path, match_settings=False)
    (tmp_path / "swap.s1p").write_text("# GHz S RI R 50\n1 0.1 0\n3 0.1 0\n2 0.1 0\n")
    with pytest.raises(TouchstoneRejected, match=r"swap\.s1p: frequencies do not increase \(3e\+09 Hz then 2e\+09"):
        v.sweep(1)
