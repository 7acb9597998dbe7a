"""Input and output: the only part of lakeloss that opens paths."""
