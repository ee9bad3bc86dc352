"""study: pure statistics for qualifying a station (gauge studies, agreement, control charts)"""
