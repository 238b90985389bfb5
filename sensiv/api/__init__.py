"""Layer 7, api: the analyses as Python functions that read like the command line.

``arguments`` normalises keyword roles, frames and the CLI's value syntax (and puts the layers'
messages in API terms); ``fitted`` reads a fitted linearmodels or pyfixest IV model;
``functions`` holds ``fit``, ``sweep``, ``prior``, ``calibrate`` and ``corrbound``, the public
names of :mod:`sensiv`.
"""
