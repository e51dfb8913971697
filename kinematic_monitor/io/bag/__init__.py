"""rosbag2 bags (sqlite3 or MCAP) as sample sources: one reader front, storage behind it.

- :mod:`.reader`: :func:`open_bag` and :class:`BagSource`, the front every caller uses;
- :mod:`.inputs`: which topics are used and how (the ``inputs.*`` parameters);
- :mod:`.storage`: storage files and the salvage back-ends of damaged files, by storage id
  (:mod:`.sqlite`, :mod:`.mcap`);
- :mod:`.errors`: :class:`BagError`.
"""

from kinematic_monitor.io.bag.errors import BagError
from kinematic_monitor.io.bag.inputs import BagInputs, inputs_from_config
from kinematic_monitor.io.bag.reader import BagSource, open_bag
from kinematic_monitor.io.sources import BagDamage, TopicStats

__all__ = ["BagError", "BagInputs", "BagDamage", "TopicStats", "BagSource", "inputs_from_config",
           "open_bag"]
