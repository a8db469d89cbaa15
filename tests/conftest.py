"""Shared pytest configuration."""

import os

# Keep numba's on-disk cache inside the repository's build area so runs
# from a clean clone do not depend on a user cache directory.
os.environ.setdefault("NUMBA_CACHE_DIR",
                      os.path.join(os.path.dirname(__file__), "..", ".venv", "numba-cache"))
