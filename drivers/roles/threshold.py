"""Threshold DAC: the discriminator level of each board channel."""

from __future__ import annotations

from drivers.roles.base import RoleDriver, check_finite

MAX_CHANNEL = 999


class ThresholdDac(RoleDriver):
    """Levels in mV per channel (sent in V)."""

    role = "threshold"

    def set_level(self, channel: int, mV: float) -> None:
        self._write("set_level", channel=_channel(channel), volts=check_finite("mV", mV) * 1e-3)

    def level_mV(self, channel: int) -> float:
        return float(self._query("get_level", channel=_channel(channel))) * 1e3


def _channel(channel: int) -> int:
    if int(channel) != channel or not 1 <= channel <= MAX_CHANNEL:
        raise ValueError(f"channel={channel!r} must be 1..{MAX_CHANNEL}")
    return int(channel)
