"""The errors Grovewise raises. Each message names the file, column or setting and what to do."""


class GrovewiseError(Exception):
    """Base class of every error Grovewise raises on bad input or a failed step."""


class ModelFileError(GrovewiseError):
    """A model file is missing, damaged, of an unknown type or holds an unsupported model."""


class UnsafeModelError(ModelFileError):
    """A model file could run code when loaded and was not marked as trusted."""


class UnsupportedModelError(ModelFileError):
    """A model (in memory or in a file) uses a variant Grovewise cannot reproduce exactly."""


class DataError(GrovewiseError):
    """A data file or array does not fit the model (columns, values, target)."""


class SettingError(GrovewiseError, ValueError):
    """A setting (option, parameter) has a value outside what it accepts."""


class CancelledError(GrovewiseError):
    """The user cancelled a step; earlier results are kept."""
