"""The package version, in a module of its own so that any stage can name it without importing the
package root (whose ``__init__`` imports the API, which imports the stages)."""

__version__ = "0.1.0"
