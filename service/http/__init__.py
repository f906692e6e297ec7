"""HTTP pieces the API (service/api) and the report pages (service/web) share.

Dependencies (settings, sessions, the caller), RFC 9457 problems, request limits, the strict JSON
body route, same-origin checks and streamed attachments. Imports nothing from api/ or web/, so
both can stand on it without importing each other.
"""
