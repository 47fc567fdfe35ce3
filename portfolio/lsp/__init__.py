"""The language server (``portfolio lsp``, docs/lsp.md).

:mod:`.analysis` answers an editor's questions from the lint's stages and
imports no protocol library; :mod:`.server` speaks the protocol through
pygls.  Nothing here is imported by the rest of the package.
"""
