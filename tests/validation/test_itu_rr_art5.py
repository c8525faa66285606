"""MW broadcast band plans against the ITU Radio Regulations, article 5.

Sources: ITU Radio Regulations art. 5; values and marks in docs/references.md §7: Regions 1 and 3, carriers every 9 kHz from 531
to 1602 kHz [src secondary]; Region 2, 10 kHz spacing [src secondary], carriers 530–1700 kHz [mem].
"""

import numpy as np
import pytest

from simloop.tuning import band_plan


def test_regions_1_and_3():
    # ITU RR art. 5 [src secondary]: 531 … 1602 kHz every 9 kHz → (1602 − 531)/9 + 1 = 120 carriers.
    for name in ("itu-1", "itu-3"):
        p = band_plan(name)
        assert p.frequencies_hz[0] == 531e3
        assert p.frequencies_hz[-1] == pytest.approx(1602e3, abs=1e-6)
        assert p.frequencies_hz.size == 120
        assert np.diff(p.frequencies_hz) == pytest.approx(np.full(119, 9e3))
        assert p.audio_hz == 4.5e3  # half the spacing, common practice
        # The allocated band 526.5–1606.5 kHz [published, secondary] is exactly filled by the
        # channels: half a spacing below the first carrier and above the last.
        assert p.frequencies_hz[0] - p.spacing_hz / 2 == pytest.approx(526.5e3, rel=1e-12, abs=0)
        assert p.frequencies_hz[-1] + p.spacing_hz / 2 == pytest.approx(1606.5e3, rel=1e-12, abs=0)
    assert np.array_equal(band_plan("itu-1").frequencies_hz, band_plan("itu-3").frequencies_hz)


def test_region_2():
    # ITU RR art. 5: 10 kHz spacing [src secondary], 530 … 1700 kHz [mem] → 118 carriers.
    p = band_plan("itu-2")
    assert p.frequencies_hz[0] == 530e3
    assert p.frequencies_hz[-1] == pytest.approx(1700e3, abs=1e-6)
    assert p.frequencies_hz.size == 118
    assert p.spacing_hz == 10e3
    assert p.audio_hz == 5e3
    # Every carrier a multiple of 10 kHz.
    assert np.allclose(p.frequencies_hz % 10e3, 0.0, atol=1e-6)
    # The Region 2 band 525–1705 kHz [from memory] is filled the same way.
    assert p.frequencies_hz[0] - p.spacing_hz / 2 == pytest.approx(525e3, rel=1e-12, abs=0)
    assert p.frequencies_hz[-1] + p.spacing_hz / 2 == pytest.approx(1705e3, rel=1e-12, abs=0)
