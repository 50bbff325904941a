"""How a Model is evaluated: the fused plain kernel, the staged kernel, compiled pointwise user terms, the jax reference, sharding."""
