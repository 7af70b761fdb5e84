"""rigloop: a hardware-in-the-loop runner for model-free control of motor and fan rigs."""

__version__ = "0.1.0"
