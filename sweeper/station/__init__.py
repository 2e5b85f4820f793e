"""A station profile: what a bench is (instruments by role, output folder, catalog, operator),
kept apart from the test plans that run on it (`sweeper.station.profile`)."""

from sweeper.station.profile import (
    STATION_ENV,
    InstrumentSlot,
    Station,
    StationError,
    bench_with_station,
    load_station,
    load_station_text,
)

__all__ = ["STATION_ENV", "InstrumentSlot", "Station", "StationError", "bench_with_station", "load_station", "load_station_text"]
