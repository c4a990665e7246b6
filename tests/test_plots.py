"""Plots: written when matplotlib is there, a one-line install hint when it is not."""

from __future__ import annotations

import builtins
from pathlib import Path

import pytest

from harness.roof import RoofCurve
from kernels.errors import StridewiseError


def test_missing_matplotlib_explains_the_extra(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    real_import = builtins.__import__

    def no_matplotlib(name: str, *args, **kwargs):  # type: ignore[no-untyped-def]
        if name.startswith("matplotlib"):
            raise ImportError("No module named 'matplotlib'")
        return real_import(name, *args, **kwargs)

    monkeypatch.setattr(builtins, "__import__", no_matplotlib)
    from harness.plots import plot_roof

    with pytest.raises(StridewiseError, match=r"pip install 'stridewise\[plot\]'"):
        plot_roof([RoofCurve(1, (1 << 14, 1 << 20), (1e11, 2e10))], str(tmp_path / "roof.png"))


def test_roof_plot_is_a_png(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    from harness.plots import plot_roof

    """Source: the PNG specification (W3C / ISO/IEC 15948), section 5.2: every PNG file starts
    with the 8-byte signature 137 80 78 71 13 10 26 10."""
    path = tmp_path / "roof.png"
    plot_roof([RoofCurve(1, (1 << 14, 1 << 20, 1 << 28), (1e11, 5e10, 1.6e10))], str(path))
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
