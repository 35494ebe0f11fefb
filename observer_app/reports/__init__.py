"""Every HTML report fieldmark writes (agree, demo, check): one Jinja2 layer with
autoescape, one style sheet, figures embedded as PNG so each file stands alone."""
