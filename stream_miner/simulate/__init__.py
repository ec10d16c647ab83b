"""Generated basket streams with planted changes and their ground truth."""
