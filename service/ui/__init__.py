"""The analyst's view: SVG charts over the API, server-rendered pages under /ui, and the
static report (`marginal report`)."""
