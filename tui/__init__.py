"""The Textual viewer of trails (screens, widgets, styles).

It reads trails only through `tracer`'s reader and index; `tracer` never imports it.
"""
