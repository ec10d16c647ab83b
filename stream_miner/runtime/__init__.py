"""The live loop of `run`: records -> checks -> window -> ticks -> sinks, with checkpoints."""
