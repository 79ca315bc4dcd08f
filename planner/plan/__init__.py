"""The campaign plan: the core, its document and schema, the output folder and the report."""
