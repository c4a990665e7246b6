"""stridewise harness: suites, sweeps, timing, reports and the command line."""

__version__ = "0.1.0"
