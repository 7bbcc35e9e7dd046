"""Results out: the export folder, model files, ONNX, prediction and the HTML report.

========================  ==================================================================
module                    job
========================  ==================================================================
``bundle``                :func:`~workbench.export.bundle.export_configuration`: one
                          configuration of a stored sweep into a folder (orchestrates the rest)
``formats``               the export formats: keys, labels, files and the writer of each
``context``               what the writers read (:class:`~workbench.export.context.ExportContext`)
``configuration``         the ``configuration.json`` document and its JSON Schema check
``refit``                 the chosen configuration refitted on every row
``atomic``                the folder written in a temporary sibling and swapped into place;
                          only an export is replaced, the user's files in it are kept
``safe_csv``              the formula-injection guard and the one CSV writer (files, stdout)
``results_csv``           the sweep's results as ``configurations.csv`` and ``trials.csv``
``reproduce``             the script copied into the folder as ``reproduce.py``
``model_files``           skops / joblib save and load, the exact skops contents,
                          ``manifest.json``
``signature``             the optional HMAC-SHA256 of the manifest with the user's key
``onnx_graph``            the fitted pipeline as an ONNX graph, and running it
``predict``               predictions of an export folder for a new table
``report``                the self-contained HTML report
========================  ==================================================================
"""
