"""conecheck: validate box-based galaxy statistics against survey-like light cones."""

__version__ = "0.1.0"
