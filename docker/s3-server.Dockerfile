# The S3-compatible server of docker/compose.yaml: s3s-fs from crates.io,
# the same server and version the tests run (.ci/s3-server), serving one
# folder with a subfolder per bucket.
FROM rust:1.95-bookworm AS build
RUN cargo install s3s-fs --version 0.14.1 --features binary --locked --root /opt/s3s

FROM debian:bookworm-slim
RUN useradd --system --uid 10002 objects && mkdir -p /objects/proctor-blobs && chown -R objects /objects
COPY --from=build /opt/s3s/bin/s3s-fs /usr/local/bin/s3s-fs
USER objects
VOLUME ["/objects"]
EXPOSE 8014
ENTRYPOINT ["/usr/local/bin/s3s-fs", "--host", "0.0.0.0", "--port", "8014"]
