"""JSON Schema of the results document (results.schema.json)."""
