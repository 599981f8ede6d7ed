"""Charts of blendq, built with matplotlib (imported lazily by each chart function)."""
