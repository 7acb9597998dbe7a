"""Pure physics of open-water evaporation: functions of arrays, no I/O."""
