"""Durable job queue in the database and the worker loop (see queue.py, worker.py)."""
