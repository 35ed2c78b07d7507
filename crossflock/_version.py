"""Package version and the output-file format version."""

__version__ = "0.1.0"

# Bumped whenever the layout of output files changes incompatibly; readers refuse
# files whose format is newer or older than they understand.
FORMAT_VERSION = 1
