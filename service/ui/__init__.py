"""The browser page at /ui: plain HTML, one stylesheet and one small script, served by the
app from this package (no build step, no external assets)."""
