"""Local clock: the user's local hour of day (0-23) or day of week (0 = Monday).

The zone comes from ``geo.utcoffset`` when present, else from ``geo.lat``/``geo.lon``
through the IANA zone boundaries, else from ``geo.country``, else UTC (see
``windvane.kinds.local_time``). Request-time only: nothing is stored.
"""

from __future__ import annotations

from typing import Literal

from windvane.inputs.lookup_request import LookupRequest
from windvane.kinds.base import BuildContext, Feature, FeatureKind, Options
from windvane.kinds.local_time import local_hour_dow


class LocalClockOptions(Options):
    value: Literal["hour", "dow"]


class LocalClockFeature(Feature):
    kind = "local_clock"

    def __init__(self, options: LocalClockOptions) -> None:
        super().__init__(options)
        self.index = 0 if options.value == "hour" else 1

    def read_request(self, request: LookupRequest) -> int:
        geo = request.geo
        if geo is None:
            return local_hour_dow(request.ts_s, None, None, None, None)[self.index]
        return local_hour_dow(request.ts_s, geo.utcoffset, geo.lat, geo.lon, geo.country)[
            self.index
        ]

    def describe(self) -> str:
        return "local hour of day" if self.index == 0 else "local day of week (0 = Monday)"


class LocalClockKind(FeatureKind):
    name = "local_clock"
    options_model = LocalClockOptions

    @classmethod
    def build(cls, options: LocalClockOptions, context: BuildContext) -> LocalClockFeature:
        return LocalClockFeature(options)
