"""Android entry point (python-for-android runs ``main.py``): the tablet app on the tablet file in the app's
private storage. Kept in the staged build only; see stage.py and DEVELOPERS.md."""

import os

os.environ.setdefault("KIVY_NO_ARGS", "1")

from mobile.settings import TabletSettings  # noqa: E402
from mobile.ui.app import TabletApp  # noqa: E402

if __name__ == "__main__":
    settings = TabletSettings()
    TabletApp(store_path=settings.store_path, labels_dir=settings.labels_dir, laser_class=settings.laser_class).run()
