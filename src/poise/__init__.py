"""poise: how probable is a stability claim about an ODE model with uncertain parameters."""

__version__ = "0.1.0"
