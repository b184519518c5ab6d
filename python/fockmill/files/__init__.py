"""Model files in TOML: the model, its sweep, record, solver, symmetry and
dynamics sections.
"""

from fockmill.files.modelfile import ModelFile, ModelFileError, load_model_file, parse_model_text

__all__ = ["ModelFile", "ModelFileError", "load_model_file", "parse_model_text"]
