"""The window's dialogs, one per module.

* :mod:`~app.dialogs.strictness`: how many values to check (target share of wrong
  digits or a confidence threshold), with a live count.
* :mod:`~app.dialogs.export`: export the checked CSV.
* :mod:`~app.dialogs.retrain`: retrain the model from the batch's corrections,
  save it and use it for the batch.
* :mod:`~app.dialogs.files`: the file choosers (scans, folder, batch, template,
  a new batch's name).
* :mod:`~app.dialogs.template_choice`: the step of File > Open scans that chooses
  the form template to read them with (the last one used or saved offered first).

The form template editor, a window of its own, is in :mod:`app.views.template_editor`.
"""
