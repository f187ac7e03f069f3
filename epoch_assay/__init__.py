"""epoch-assay: score EEG preprocessing pipelines on a lab's own epoch sets."""

__version__ = "0.1.0"
