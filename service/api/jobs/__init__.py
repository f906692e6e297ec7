"""Selection jobs: submit, get, list, cancel, and their fold scores."""
