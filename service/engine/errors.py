"""Engine exceptions, mapped to HTTP 422 in one place (``service.errors``)."""


class EngineError(ValueError):
    """The request is well-formed but the engine cannot honour it.

    :param message: human-readable explanation naming the offending value.
    :param field: dotted path of the request field at fault (``"supply.v_pos"``), if any.
    """

    def __init__(self, message: str, field: str | None = None):
        super().__init__(message)
        self.message = message
        self.field = field
