"""Report pages: server-rendered HTML with inline SVG charts, behind a signed session cookie."""
