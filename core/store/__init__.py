"""What phasewake writes: atomic writes, the result cache and its codec, JSON values."""
