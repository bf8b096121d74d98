# The single source of the version: CMakeLists.txt and pyproject.toml both read this line.
__version__ = "0.1.0"
