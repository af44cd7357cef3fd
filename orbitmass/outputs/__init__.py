"""Products of a fit for readers: figures, tables, reports.

Modules (one concern each):

- :mod:`.style` -- the shared look (Okabe-Ito palette, journal sizes, ``style_context``),
  atomic file writes and ``save_figure``;
- :mod:`.formatting` -- rounding with asymmetric errors, powers of ten, display units,
  escaping for LaTeX and Markdown;
- :mod:`.tables` -- the results table and its LaTeX, CSV, Markdown and ECSV files;
- :mod:`.reports` -- ``report.md`` and ``report.html``;
- :mod:`.figures` -- ``corner``, ``orbit`` and ``trace`` figures, their captions;
- :mod:`.registry` -- the renderer registry (the contract every output format follows);
- :mod:`.products` -- ``write_products(results, out_dir)``: everything, through the registry;
- :mod:`.plots` -- the figure functions under their older module path.

Labels, units and symbols come from :mod:`orbitmass.model.quantities`.
"""
