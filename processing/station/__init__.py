"""The station: watch an export folder, process files in a worker pool, keep the ledger."""
