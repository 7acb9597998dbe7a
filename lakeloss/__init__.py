"""lakeloss: open-water evaporation for many water bodies from gridded climate."""

__version__ = "0.1.0"
