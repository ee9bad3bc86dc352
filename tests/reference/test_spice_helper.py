"""The ngspice helper itself: skipped without ngspice locally, a failure under CI."""

from __future__ import annotations

import pytest

from tests.reference import spice


def test_missing_ngspice_skips_locally_and_fails_under_ci(monkeypatch):
    monkeypatch.setattr(spice.shutil, "which", lambda name: None)
    monkeypatch.delenv("CI", raising=False)
    with pytest.raises(pytest.skip.Exception):
        spice.ngspice()
    monkeypatch.setenv("CI", "true")
    with pytest.raises(pytest.fail.Exception, match="ngspice is required under CI"):
        spice.ngspice()


def test_netlist_follows_the_batch_pattern(tmp_path):
    # REFERENCES.md s3: wr_singlescale + wr_vecnames, the tight options, device current -i(VA)
    part = spice.jfet_source("p", -3.0, 10e-3, 0.01, 1000.0)
    text = part.netlist(0.0, 40.0, 0.05, tmp_path / "out.dat")
    for line in (
        "J1 anode 0 src JN",
        "RS1 src 0 1000",
        "VA anode 0 DC 0",
        "  set wr_singlescale",
        "  set wr_vecnames",
        "  option numdgt=7 reltol=1e-6 abstol=1e-15 vntol=1e-9",
        "  dc VA 0 40 0.05",
        "  let id = -i(VA)",
    ):
        assert line in text.splitlines()
    assert "BETA=0.001111111111" in text  # IDSS / VTO^2 = 10 mA / 9 V^2
