"""Protocol code generated from proto/stillsky/v1/*.proto by generate.sh; do not edit."""
