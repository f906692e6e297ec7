"""Taking a job in: the request, validating it before anything is stored, writing it, and the
one post-commit start every submitter calls."""
