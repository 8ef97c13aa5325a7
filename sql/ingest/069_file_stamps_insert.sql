-- the stamps and sha256 of the files discovery just read
insert into file_stamps by name
select
    unnest($paths::varchar[]) as path,
    unnest($bytes::bigint[]) as bytes,
    unnest($mtimes::bigint[]) as mtime_ns,
    unnest($ctimes::bigint[]) as ctime_ns,
    unnest($inodes::ubigint[]) as inode,
    unnest($devices::ubigint[]) as device,
    unnest($sha256s::varchar[]) as sha256,
    unnest($recorded_at::bigint[]) as recorded_at_ns,
