"""Sensor conversions from raw readings to physical quantities."""

from .sensors import (  # noqa: F401
    gravity_from_latitude,
    immersion_from_wetness, seawater_density_from_temperature, water_level_from_pressure,
    wetness_from_reading,
)
