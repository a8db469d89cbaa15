"""The invented demo scenarios: a cover-crop field trial and a river water-quality survey."""
