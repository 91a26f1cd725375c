"""velspec: first-pass velocity analysis of prestack 2D seismic lines on the CPU.

The data flow is read (``velspec.io``) -> scan (``velspec.scan``) -> pick (``velspec.pick``)
-> interval (``velspec.interval``) -> write (``velspec.io.result``); ``velspec.pipeline``
strings the stages together and ``velspec.cli`` is the thin command line around it.
"""

__version__ = "0.1.0"
FORMAT_VERSION = 1
