"""The review's report: document model, HTML and PDF renderers, figures and manifest."""
