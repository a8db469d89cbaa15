"""Planning the next study: power and group sizes by simulation of the whole route."""
