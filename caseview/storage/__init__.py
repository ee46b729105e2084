"""Workspace storage: ALL SQL of caseview lives in this package.

See :mod:`caseview.storage.workspace` for the storage discipline, :mod:`caseview.storage.audit`
for the hash-chained audit trail and :mod:`caseview.storage.schema` for the schema.
"""

from .audit import AuditEntry, AuditVerification
from .caseload import Caseload
from .contact_writer import ContactBatch, ContactConflicts, WriteCounts
from .workspace import ModelVersion, Workspace

__all__ = ["Workspace", "Caseload", "ModelVersion", "AuditEntry", "AuditVerification",
           "ContactBatch", "ContactConflicts", "WriteCounts"]
