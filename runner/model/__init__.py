"""Built models: a sweep's chosen cell taken out of the sweep as one fitted pipeline.

`build.py` fits it from the sweep's own spec, data and seed and keeps it (a skops artefact
and its card, in files and in the store's `models` table); `card.py` is the card;
`artefact.py` the saved bytes and the gates every load passes; `keep.py` gets a model back
from a file or the store; `predict.py` predicts new files in chunks. Like the write side,
this package fits and loads scikit-learn objects; the store and the read side do not."""
