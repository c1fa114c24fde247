"""studylog: the working memory of a data-analysis study."""

__version__ = "0.1.0"

__all__ = ["__version__"]
