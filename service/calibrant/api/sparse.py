"""A response model whose optional fields are left out, not written as null, when the service gave none.

Several bodies have keys that exist only for some variants (``window_start`` only for a
trailing window, ``streams`` only for a chart rule); writing them as null everywhere
would change the body's shape. The fields stay documented, as optional, in the schema.
"""

from __future__ import annotations

from typing import Any, ClassVar

from pydantic import BaseModel, SerializerFunctionWrapHandler, model_serializer


class SparseModel(BaseModel):
    omitted_when_absent: ClassVar[frozenset[str]] = frozenset()

    # No return annotation on purpose: pydantic reads one as the serialized schema and would then
    # document a bare dict instead of the model's own fields, so mypy is told to let it be.
    @model_serializer(mode="wrap")
    def _omit_absent(self, handler: SerializerFunctionWrapHandler):  # type: ignore[no-untyped-def]
        data: dict[str, Any] = handler(self)
        for name in self.omitted_when_absent - self.model_fields_set:
            data.pop(name, None)
        return data
