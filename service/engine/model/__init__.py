"""The circuit model: dataclasses of the circuit, its JSON form and the op-amp catalog."""
