"""The low layer every stage depends on: errors, validation, the Layout, families,
the comparisons table and the decision record.  Nothing here imports another stage."""
