"""Screen fraction: how much of the screen the ad covers, from the request alone.

``slot.w * slot.h`` over the screen area in device-independent pixels, capped at 1.
The screen is ``device.w / pxratio`` by ``device.h / pxratio`` (OpenRTB 2.5: device
w/h are physical pixels, pxratio physical per device-independent pixel, banner w/h
device-independent pixels); a device without pxratio is taken at 1. When the request
has no screen size, the device table gives it by ``device.model``; otherwise the value
is null.
"""

from __future__ import annotations

from pathlib import Path

from windvane.inputs.lookup_request import LookupRequest
from windvane.kinds.base import BuildContext, Feature, FeatureKind, FieldProblem, Options
from windvane.kinds.device_table import DeviceTableError, load_device_table


class ScreenFractionOptions(Options):
    devices: str | None = None


class ScreenFractionFeature(Feature):
    kind = "screen_fraction"

    def __init__(self, options: ScreenFractionOptions, table: dict[str, tuple[float, float]]):
        super().__init__(options)
        self.table = table

    def read_request(self, request: LookupRequest) -> float | None:
        slot, device = request.slot, request.device
        if slot is None or device is None:
            return None
        if device.w and device.h:
            ratio = device.pxratio or 1.0
            screen = (device.w / ratio) * (device.h / ratio)
        else:
            size = self.table.get(device.model) if device.model else None
            if size is None:
                return None
            screen = size[0] * size[1]
        return min(1.0, slot.w * slot.h / screen)

    def describe(self) -> str:
        return f"slot area over screen area (device table: {len(self.table)} models)"


class ScreenFractionKind(FeatureKind):
    name = "screen_fraction"
    options_model = ScreenFractionOptions

    @classmethod
    def build(cls, options: ScreenFractionOptions, context: BuildContext) -> ScreenFractionFeature:
        table: dict[str, tuple[float, float]] = {}
        if options.devices is not None:
            try:
                table = load_device_table(Path(context.source_dir) / options.devices)
            except DeviceTableError as exc:
                raise FieldProblem("devices", str(exc)) from None
        return ScreenFractionFeature(options, table)
