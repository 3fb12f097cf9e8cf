"""foldwise: keep, browse and compare every score of a nested cross-validation."""

__version__ = "0.1.0"

__all__ = ["Assessment", "Recorder", "assessments", "build_ensemble", "load", "nested_cv"]


def __getattr__(name):
    # Lazy, so that the server and the client do not pay for importing scikit-learn.
    if name == "nested_cv":
        from foldwise.runner.nested import nested_cv

        return nested_cv
    if name == "Recorder":
        from foldwise.runner.recorder import Recorder

        return Recorder
    if name == "build_ensemble":
        from foldwise.ensemble import build_ensemble

        return build_ensemble
    if name in ("load", "assessments"):
        from foldwise import loading

        return getattr(loading, name)
    if name == "Assessment":
        from foldwise.assessment import Assessment

        return Assessment
    raise AttributeError(f"module 'foldwise' has no attribute {name!r}")
