"""kinset: characterise a reel of diodes and form matched sets for each application."""

__all__ = ["__version__"]


def __getattr__(name: str):
    """``kinset.__version__``, looked up on first use (PEP 562): importlib.metadata costs
    every step ~0.05 s of start-up, and most never ask for the version (issue 18)."""
    if name != "__version__":
        raise AttributeError(f"module 'kinset' has no attribute {name!r}")
    from importlib.metadata import PackageNotFoundError, version
    try:
        value = version("kinset")
    except PackageNotFoundError:  # running from a source tree that was never installed
        value = "0+unknown"
    globals()["__version__"] = value
    return value
