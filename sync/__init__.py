"""streamtab sync: moving trips between the device store and a hub (folder, WebDAV, HTTP endpoint)."""
