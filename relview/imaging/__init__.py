"""Image making and files: exposure, tone, encoders and atomic writers of every output."""
