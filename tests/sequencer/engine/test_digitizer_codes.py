"""Recovering a converter's codes from calibrated samples (sequencer.engine.steps.digitizer): exact
on the code grid, refused off it (an averaged capture is not a record of codes)."""

import numpy as np
import pytest

from sequencer.engine.steps.digitizer import DigitizerInputError, converter_codes


def test_codes_on_the_grid_come_back_exactly():
    lsb = 1000.0 / 1024  # 10 bits over 1000 mV
    codes = np.array([0, 1, 511, 512, 1023])
    mV = (codes - 512) * lsb + 3.0
    assert converter_codes(mV, bits=10, range_mV=1000.0, offset_mV=3.0).tolist() == codes.tolist()


def test_averaged_or_wrongly_described_samples_are_refused():
    lsb = 1000.0 / 1024
    averaged = (np.array([10.0, 10.25, 11.5]) - 512) * lsb  # an average of 4 captures
    with pytest.raises(DigitizerInputError, match="off the code grid"):
        converter_codes(averaged, bits=10, range_mV=1000.0, offset_mV=0.0)
    twelve_bit = (np.array([1, 2, 3]) - 2048) * 1000.0 / 4096
    with pytest.raises(DigitizerInputError):
        converter_codes(twelve_bit, bits=10, range_mV=1000.0, offset_mV=0.0)
