-- every recorded stamp: what discovery compares each file's stat with
select
    path,
    bytes,
    mtime_ns,
    ctime_ns,
    inode,
    device,
    sha256,
    recorded_at_ns,
from file_stamps
