"""Wire format of certimatch: marshmallow schemas of requests, answers and problem documents."""

from schemas.answer import (
    AnswerSchema,
    CertificateSchema,
    CheckSchema,
    SolveResultSchema,
    VerifyRequestSchema,
    VerifyResultSchema,
)
from schemas.numbers import MAX_ABS_VALUE
from schemas.pointers import to_pointers
from schemas.problem import ProblemSchema
from schemas.problem_document import ProblemDocumentSchema
from schemas.tables import Table

__all__ = [
    "MAX_ABS_VALUE",
    "AnswerSchema",
    "CertificateSchema",
    "CheckSchema",
    "ProblemDocumentSchema",
    "ProblemSchema",
    "SolveResultSchema",
    "Table",
    "VerifyRequestSchema",
    "VerifyResultSchema",
    "to_pointers",
]
