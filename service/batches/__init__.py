"""The batch wing: everything a batch is, with no HTTP server types.

- intake.py: a submission's body into stored rows (rules, limits, idempotency);
  errors.py: `Refused`, which the API maps to problem documents
- documents.py, lines.py: one document's shape; NDJSON lines
- repository.py: batch rows, counts, cancel, purge and retention, listing
- leases.py, heartbeat.py, processing.py, taggers.py: claiming a chunk, keeping
  its lease, tagging it and writing results so no crash loses or repeats one
- results.py, summaries.py, cursors.py: reading results, summaries, failures
- status.py: the status document and the webhook body
- webhooks/: callback URL policy, signatures, delivery rows, the POST itself

`worker/` is only the process around it (loop, embedded mode, metrics);
`service/api/routes/batches.py` only maps HTTP to these calls. The store
(`service/store`) never imports this package.
"""
