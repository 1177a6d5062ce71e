"""Event streams: the stream type, file formats and the simulated sensor."""

from snnconvert.events.formats import SUFFIXES, decode_bin, encode_bin, parse_sensor, read_events, write_events
from snnconvert.events.sensor import STIMULI, SensorConfig, simulate, simulate_batch
from snnconvert.events.stream import EVENT_DTYPE, EventStream

__all__ = ["EVENT_DTYPE", "EventStream", "read_events", "write_events", "parse_sensor", "encode_bin", "decode_bin",
           "SUFFIXES", "SensorConfig", "simulate", "simulate_batch", "STIMULI"]
