"""Side panels beside the drawing."""
