"""The outputs: every face the results show, as text.

Owns the C header (`header` with `templates/header.h.j2`), the JSON and terminal views
(`views`), the text timing diagram (`diagram`), the HTML report with its SVG figures (`report`,
`figures`, `svg`), the generated capture firmware (`firmware`) and the Jinja2 environment
(`templating`). May import any part below it; never imports cli, and never writes a file
(rendering returns text; only the command line writes). The only part that imports Jinja2.
"""
