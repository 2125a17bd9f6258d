/* warp_pointer.c — moves the pointer of the X display to the bottom-right corner of the
 * screen, so that screenshots of dialogs show no widget lit by a hovering pointer. */
#include <X11/Xlib.h>
#include <stdio.h>

int
main (void)
{
  Display *display = XOpenDisplay (NULL);
  int screen;

  if (!display)
    {
      fprintf (stderr, "warp-pointer: cannot open the display\n");
      return 1;
    }
  screen = DefaultScreen (display);
  XWarpPointer (display, None, RootWindow (display, screen), 0, 0, 0, 0,
                DisplayWidth (display, screen) - 1, DisplayHeight (display, screen) - 1);
  XCloseDisplay (display);
  return 0;
}
