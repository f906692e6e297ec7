"""The local driver: a job or learning curve run on a process pool in this process's store."""
