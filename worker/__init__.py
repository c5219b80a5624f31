"""The batch worker: claims chunks of submitted documents, tags them, writes results.

Run it as `whichsense worker` (one process per core is a sensible start), or
embedded in `whichsense serve` (one thread, for single-host SQLite setups).

Scaling out: start any number of `whichsense worker` processes, on any number
of machines, against one PostgreSQL database (WHICHSENSE_DATABASE_URL). They
coordinate only through the database: a chunk is claimed with
`SELECT ... FOR UPDATE SKIP LOCKED` and leased for WHICHSENSE_LEASE_SECONDS,
the lease is extended by a heartbeat while the chunk is worked on, and results
are written in the same transaction that checks the lease and marks the chunk
done. A worker that dies simply stops heartbeating; its chunk becomes claimable
again when the lease expires, and because a document's results are written
only while it is still pending, nothing is lost or written twice. Lease times
come from PostgreSQL's clock, so machine clocks need not agree. Each process
loads its own encoder (about 100 MB of memory for MiniLM) and caches engines
per inventory version and evidence watermark. Webhooks are delivered by
whichever worker finds one due. SQLite works with one machine only (its
single writer lock serialises claims); use PostgreSQL for more than one.

Nothing here is imported by the API; shared logic lives under `service`.
"""
