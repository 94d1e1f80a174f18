"""Outputs: the HTML report and the C99 export with its templates (``c_templates/``)."""
