"""The version of famwise: the one place it is written.

``pyproject.toml`` reads it from here (``[tool.setuptools.dynamic]``), so the
installed metadata and ``famwise --version`` always agree, and start-up does
not pay for ``importlib.metadata``.
"""

__version__ = "0.2.0"
