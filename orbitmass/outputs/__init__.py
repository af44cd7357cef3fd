"""What a fit shows: the journal figure style, figures, tables and reports."""
