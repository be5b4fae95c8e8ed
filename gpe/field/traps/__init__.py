"""Static trap shapes: the interface in gpe/field/traps/base.py, one module per shape beside it."""
