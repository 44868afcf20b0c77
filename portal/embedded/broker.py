"""The embedded default's broker: kombu's filesystem transport, with each message written
whole before a reader can see it.

kombu's own ``_put`` creates ``<time>_<uuid>.<queue>.msg`` and then writes into it; a worker
polling the folder may move and read the file in between, find it empty or cut, and stop on
a JSONDecodeError (seen on the full demo). Here the message is written under a name readers
skip (``….msg.partial``: its part after the first dot is not ``<queue>.msg``) and renamed
into place, which is atomic within one folder."""

import os
import uuid
from time import monotonic

from kombu.exceptions import ChannelError
from kombu.transport import filesystem
from kombu.utils.encoding import str_to_bytes
from kombu.utils.json import dumps


class Channel(filesystem.Channel):
    def _put(self, queue, payload, **kwargs):
        """Put ``payload`` on ``queue``: written to a partial file, then renamed."""
        name = f"{int(round(monotonic() * 1000))}_{uuid.uuid4()}.{queue}.msg"
        final = os.path.join(self.data_folder_out, name)
        partial = final + ".partial"
        try:
            with open(partial, "wb") as out:
                out.write(str_to_bytes(dumps(payload)))
            os.replace(partial, final)
        except OSError as exc:
            raise ChannelError(f"Cannot add file {final!r} to directory") from exc


class Transport(filesystem.Transport):
    Channel = Channel
