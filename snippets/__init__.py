"""Browser-side templates the snippet is rendered from (shipped inside the package)."""
