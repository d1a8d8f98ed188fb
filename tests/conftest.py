"""Fixtures shared by every test package."""

from tests.brokers import mosquitto, private_mosquitto

__all__ = ["mosquitto", "private_mosquitto"]
