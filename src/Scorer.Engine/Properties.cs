// Scoring buffers are stackalloc'ed per row and always written before they are read: skip zeroing them.
[module: System.Runtime.CompilerServices.SkipLocalsInit]
