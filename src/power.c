/* power: placeholder until its issue lands. */
#include "bandlink/status.h"
