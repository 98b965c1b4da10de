# Root conftest: makes pytest import this checkout's own magvault/ (the rootdir
# is put on sys.path), so the tests exercise the source tree.
