"""The cycle loops a submodel kernel runs in: the state layout from declarations, the built-in compiled loop, and the loops generated from kernels."""
