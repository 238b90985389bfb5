"""sensiv: sensitivity analysis for instrumental-variable estimates.

The package namespace is kept free of heavy imports so that the command line starts
instantly; import the layers directly (``sensiv.data``, ``sensiv.estimation.moments``, ``sensiv.estimation.iv``).
"""

__version__ = "0.1.0"
