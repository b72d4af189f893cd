"""The template workbooks, shipped inside the package as ``kernels_helpers.workbook``.

``make_template.py`` is their one source: it writes ``shear_interpretation.ipynb``; a test fails when
the committed notebook differs from what it builds. At run time the template is found with
:func:`kernels_helpers.resources.workbook_template`, in a checkout and in an installed wheel alike.
"""
