"""Report writers: figures, HTML, Markdown and JSON. The only package that imports matplotlib."""
