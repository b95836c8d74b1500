"""One module per command (design, redraw, audit with its repair policy, sweep, the later-count
demo), with the inputs, the run summary and the outputs they share. `zonedesign.api` is
their public face."""
