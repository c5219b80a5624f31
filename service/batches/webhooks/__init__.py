"""A batch's completion notice: callback URL checks, signatures, delivery rows, the POST."""
