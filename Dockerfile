# simloop in a container: ngspice from Debian plus the simloop package, run as a non-root user.
#
#   docker build -t simloop .
#   docker run --rm -v "$PWD:/work" simloop demo --out /work/demo-output
#
# Build argument EXTRAS picks the optional dependencies from pyproject.toml that go in with the
# package, as pip install ".[${EXTRAS}]" (or plain "." when EXTRAS is empty):
#   EXTRAS=dask (default)  the same image serves as a Dask worker image for sweeps on a cluster:
#                          docker run --rm --entrypoint dask simloop worker tcp://SCHEDULER:8786
#   EXTRAS=dask,test       a CI image that can also run the test suite, kept at /opt/simloop:
#                          docker run --rm --entrypoint python simloop-ci -m pytest -p no:cacheprovider /opt/simloop/tests
#   EXTRAS=                the package alone.
# The system packages come from packaging/debian-packages.txt, the list bootstrap.sh installs
# from too; tests/test_packaging.py checks that the two stay in step.
FROM python:3.11-slim-bookworm

ARG EXTRAS=dask

# DASK_DISTRIBUTED__WORKER__DAEMON=False: a Dask worker started from this image may start the
# engine's own worker processes (daemonic processes may not have children).
ENV PYTHONDONTWRITEBYTECODE=1 \
    PYTHONUNBUFFERED=1 \
    PIP_DISABLE_PIP_VERSION_CHECK=1 \
    NGSPICE_LIBRARY_PATH=libngspice.so.0 \
    DASK_DISTRIBUTED__WORKER__DAEMON=False

# System packages: every name in the list ('#' comments stripped), nothing else.
COPY packaging/debian-packages.txt /tmp/debian-packages.txt
RUN apt-get update \
    && sed -e 's/#.*//' /tmp/debian-packages.txt \
       | DEBIAN_FRONTEND=noninteractive xargs apt-get install -y --no-install-recommends \
    && rm -rf /var/lib/apt/lists/* /tmp/debian-packages.txt

# The simloop package itself (not editable), from the project root copied in.
WORKDIR /opt/simloop
COPY . .
RUN pip install --no-cache-dir ".${EXTRAS:+[$EXTRAS]}"

# A non-root user and an empty working directory to mount inputs and outputs on.
RUN useradd --create-home --uid 1000 --shell /usr/sbin/nologin simloop \
    && mkdir /work \
    && chown simloop:simloop /work
USER simloop
WORKDIR /work

ENTRYPOINT ["simloop"]
CMD ["--help"]
