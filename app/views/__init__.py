"""The views of the main window, one per module. Each shows what the library's
read-only views of a batch give it and reports what the clerk does through
Qt signals; none of them opens or closes a batch or starts a worker.

* :mod:`~app.views.start_page`: shown while no batch is open.
* :mod:`~app.views.page_list`: the batch's pages with their counts.
* :mod:`~app.views.page_view`: one page with its fields outlined by state.
* :mod:`~app.views.review_panel`: checking fields one at a time, keyboard first.
* :mod:`~app.views.sort_wall`: every digit to check, grouped by the digit read.
* :mod:`~app.views.model_panel`: the model reading the batch and its figures.
* :mod:`~app.views.status_bar`: messages, reading progress, the caution.
* :mod:`~app.views.template_editor`: the form template editor (a window of its own).
"""
