"""The circuit engine: component models, fault injection and batched nodal analysis."""
