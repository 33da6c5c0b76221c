"""swingmeter application: sources, the block engine, sinks and the command line.

`monitor` imports `dsp`; `dsp` never imports `monitor`.
"""

__version__ = "0.1.0"
