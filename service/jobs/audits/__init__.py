"""Audits: recomputing a sample of stored fold scores to check them."""
