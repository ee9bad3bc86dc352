# Puts the repository root on sys.path, so the tests import the packages from this checkout.
