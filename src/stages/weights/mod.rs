//! Weight stages: input encoding, programmable elements, signed-weight encodings.
