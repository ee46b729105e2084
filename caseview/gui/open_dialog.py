"""Opening a workspace: a file on this computer, or a team workspace on a PostgreSQL server.

:class:`OpenWorkspaceDialog` takes either a workspace file (typed or chosen with Browse…) or a
connection URL (``postgresql://alice@db.example/team``, or ``postgresql:///team?host=/run/sock``);
a URL never holds a password. When the server asks for one, :class:`PasswordDialog` asks for it
(typed characters are not shown); it is kept in memory while the window has the workspace open
(the window's worker threads open their own connections) and is never written anywhere.
"""

from __future__ import annotations

from PySide6.QtWidgets import (QDialog, QDialogButtonBox, QFileDialog, QHBoxLayout, QLabel, QLineEdit, QPushButton,
                               QVBoxLayout)


class OpenWorkspaceDialog(QDialog):
    """Path or URL of the workspace to open; ``location()`` gives what was typed or chosen."""

    def __init__(self, parent=None, recent=()):
        super().__init__(parent)
        self.setWindowTitle("Open workspace")
        self.setObjectName("openWorkspaceDialog")
        layout = QVBoxLayout(self)
        layout.addWidget(QLabel("A workspace file on this computer, or a team workspace on a PostgreSQL server\n"
                                "(postgresql://login@server/database; no password here, the server asks for it)."))
        row = QHBoxLayout()
        self.location_edit = QLineEdit()
        self.location_edit.setObjectName("workspaceLocation")
        self.location_edit.setAccessibleName("Workspace file or PostgreSQL URL")
        self.location_edit.setPlaceholderText("/path/to/caseload.cvw  or  postgresql://login@server/database")
        recent = list(recent)
        if recent:
            self.location_edit.setText(str(recent[0]))
        row.addWidget(self.location_edit, 1)
        self.browse_button = QPushButton("Browse…")
        self.browse_button.clicked.connect(self._browse)
        row.addWidget(self.browse_button)
        layout.addLayout(row)
        self.problem = QLabel("")
        self.problem.setObjectName("openProblem")
        self.problem.setWordWrap(True)
        layout.addWidget(self.problem)
        buttons = QDialogButtonBox(QDialogButtonBox.Open | QDialogButtonBox.Cancel)
        buttons.accepted.connect(self._accept)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)
        self.resize(620, self.sizeHint().height())

    def location(self) -> str:
        return self.location_edit.text().strip()

    def _browse(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Open workspace", "", "caseview workspace (*.cvw);;All files (*)")
        if path:
            self.location_edit.setText(path)

    def _accept(self) -> None:
        from caseview.errors import CaseviewError
        from caseview.storage.location import workspace_location

        if not self.location():
            self.problem.setText("Give a workspace file or a postgresql:// URL.")
            return
        try:
            workspace_location(self.location())  # a URL with a password or a bad form is refused here
        except CaseviewError as exc:
            self.problem.setText(str(exc))
            return
        self.accept()


class PasswordDialog(QDialog):
    """Asks for the password of one login on one server; the characters typed are not shown."""

    def __init__(self, parent, url: str, login: str, problem: str = ""):
        super().__init__(parent)
        self.setWindowTitle("Password")
        self.setObjectName("passwordDialog")
        layout = QVBoxLayout(self)
        layout.addWidget(QLabel(f"The server asks for the password of {login or 'your login'}\nfor {url}."))
        self.password_edit = QLineEdit()
        self.password_edit.setObjectName("password")
        self.password_edit.setAccessibleName("Password")
        self.password_edit.setEchoMode(QLineEdit.Password)
        layout.addWidget(self.password_edit)
        if problem:
            note = QLabel(problem)
            note.setWordWrap(True)
            layout.addWidget(note)
        layout.addWidget(QLabel("It is used for this session only and never stored."))
        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        layout.addWidget(buttons)

    def password(self) -> str:
        return self.password_edit.text()


def ask_password(parent, url: str, login: str, problem: str = "") -> str | None:
    """The password typed, or None when the person cancelled."""
    dialog = PasswordDialog(parent, url, login, problem)
    return dialog.password() if dialog.exec() == QDialog.Accepted else None
