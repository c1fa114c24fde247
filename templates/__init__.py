"""The Jinja2 templates of studylog's documents; installed as the package ``studylog.templates``."""
