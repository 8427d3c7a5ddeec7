"""Channel maps: which sensor, which chain and which calibration stands behind each channel."""

from countmill.chanmap.compiled import ChannelMap, ChannelRevision, DerivedChannel
from countmill.chanmap.load import load_map, parse_map

__all__ = ["ChannelMap", "ChannelRevision", "DerivedChannel", "load_map", "parse_map"]
