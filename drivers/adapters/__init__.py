"""Reference adapters built on the plug-in interface (``py:`` specs, :mod:`..plugins`).

Each module is imported only when a spec names it, so its optional dependencies stay optional:

- :mod:`.binary`: rotation mounts and shutters of a framed binary message protocol
  (:mod:`.framed`), over any pyserial port;
- :mod:`.tagger`: a photon counter reached through a time-tagger library object, with
  coincidences between two channels;
- :mod:`.camera`: a pointer reader from camera frames (a ``grab()`` callable or image files a
  camera program writes into a folder);
- :mod:`.epics`: mounts from motor records and counters from scaler records of an EPICS
  control system (``pip install "aligner[epics]"``).
"""
