# SPDX-License-Identifier: MIT
# Turns the migration scripts db/NNN_*.sql into a C array of strings so the
# schema travels inside the binary. Called by the build, not by hand.
# NAME (default sl__schema, the private prefix) names the arrays: NAME_migrations, NAME_migration_count.
separate_arguments(files NATIVE_COMMAND "${SQL_FILES}")
if(NOT NAME)
  set(NAME sl__schema)
endif()
set(body "/* Generated from the db folder by cmake/embed_sql.cmake; do not edit. */\n#include <stddef.h>\nconst char *const ${NAME}_migrations[] = {\n")
set(count 0)
foreach(f ${files})
  file(READ ${f} text)
  string(REPLACE "\\" "\\\\" text "${text}")
  string(REPLACE "\"" "\\\"" text "${text}")
  string(REPLACE "\n" "\\n\"\n  \"" text "${text}")
  string(APPEND body "  \"${text}\",\n")
  math(EXPR count "${count} + 1")
endforeach()
string(APPEND body "  NULL\n};\nconst size_t ${NAME}_migration_count = ${count};\n")
file(WRITE ${OUT} "${body}")
